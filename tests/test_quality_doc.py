"""docs/quality.md's example is the program's real output: the python block runs in a fresh
interpreter and must print exactly the text block that follows it."""

from __future__ import annotations

import re
import subprocess
import sys
from pathlib import Path

DOC = Path(__file__).resolve().parent.parent / "docs" / "quality.md"


def test_the_example_prints_what_the_doc_says() -> None:
    text = DOC.read_text(encoding="utf-8")
    match = re.search(r"```python\n(.*?)```\s*```text\n(.*?)```", text, re.DOTALL)
    assert match, "docs/quality.md: no python block followed by a text block"
    code, expected = match.groups()
    done = subprocess.run(
        [sys.executable, "-c", code], capture_output=True, text=True, timeout=120, check=False
    )
    assert done.returncode == 0, done.stderr
    assert done.stdout == expected
