"""The docs' ``$ heft ...`` examples are the program's real output.

Every fenced block in README.md and docs/*.md is read: a line ``$ heft ARGS`` (``\\`` continues
it) is run through the real command line in a fresh interpreter, and the lines after it, up to
the next ``$`` line or the end of the block, must be exactly what it prints. A line ``...`` stands
for any number of lines. A ``toml`` block whose first line is ``# NAME.toml ...`` is written to
NAME.toml first, so an example may read it. A block right after
``<!-- example not run: REASON -->`` is left alone (output that depends on the machine).
"""

from __future__ import annotations

import json
import re
import shlex
import subprocess
import sys
from dataclasses import dataclass, field
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent
DOCS = [ROOT / "README.md", *sorted((ROOT / "docs").glob("*.md"))]
NOT_RUN = re.compile(r"<!-- example not run: .+ -->")
FILE_HEADER = re.compile(r"#\s*([\w.-]+\.toml)\b")


@dataclass
class Example:
    doc: Path
    line: int
    argv: list[str]
    expected: list[str] = field(default_factory=list)
    files: dict[str, str] = field(default_factory=dict)

    @property
    def id(self) -> str:
        return f"{self.doc.name}:{self.line}"


def _blocks(doc: Path) -> list[tuple[int, str, list[str], bool]]:
    """(first line number, info string, lines, skipped) of each fenced block."""
    lines = doc.read_text(encoding="utf-8").splitlines()
    blocks: list[tuple[int, str, list[str], bool]] = []
    i = 0
    while i < len(lines):
        if lines[i].startswith("```"):
            info, start = lines[i][3:].strip(), i + 1
            end = next(j for j in range(start, len(lines)) if lines[j].startswith("```"))
            before = [t for t in lines[:i] if t.strip()][-1:] or [""]
            blocks.append((start + 1, info, lines[start:end], bool(NOT_RUN.fullmatch(before[0]))))
            i = end + 1
        else:
            i += 1
    return blocks


def collect(doc: Path) -> list[Example]:
    examples: list[Example] = []
    files: dict[str, str] = {}
    for first, info, lines, skipped in _blocks(doc):
        if info == "toml" and lines and (m := FILE_HEADER.match(lines[0])):
            files[m.group(1)] = "\n".join(lines) + "\n"
            continue
        if skipped:
            continue
        current: Example | None = None  # output never runs past the end of its block
        i = 0
        while i < len(lines):
            if lines[i].startswith("$ heft "):
                command, number = lines[i][2:], first + i
                while command.endswith("\\"):
                    i += 1
                    command = command[:-1] + " " + lines[i].strip()
                current = Example(doc, number, shlex.split(command)[1:], files=dict(files))
                examples.append(current)
            elif current is not None:
                current.expected.append(lines[i])
            i += 1
    return examples


EXAMPLES = [example for doc in DOCS for example in collect(doc)]


def _matches(expected: list[str], actual: list[str]) -> bool:
    """``expected`` against ``actual``, a ``...`` line matching any run of lines."""
    if not expected:
        return not actual
    if expected[0].strip() == "...":
        return any(_matches(expected[1:], actual[k:]) for k in range(len(actual) + 1))
    return bool(actual) and expected[0].rstrip() == actual[0].rstrip() and _matches(
        expected[1:], actual[1:]
    )


def test_examples_were_found() -> None:
    assert len(EXAMPLES) >= 5, [e.id for e in EXAMPLES]
    assert any(e.doc.name == "README.md" for e in EXAMPLES)


@pytest.mark.parametrize("example", EXAMPLES, ids=lambda e: e.id)
def test_example_prints_what_the_docs_show(example: Example, tmp_path: Path) -> None:
    for name, text in example.files.items():
        (tmp_path / name).write_text(text, encoding="utf-8")
    done = subprocess.run(
        [sys.executable, "-m", "heft.tui.cli", *example.argv], cwd=tmp_path,
        capture_output=True, text=True, timeout=120, check=False,
    )  # fmt: skip
    assert done.returncode == 0, f"{example.id}: {done.stderr}"
    actual = done.stdout.rstrip("\n").splitlines()
    expected = list(example.expected)
    while expected and not expected[-1].strip():  # a blank line before the next example
        expected.pop()
    if not expected:  # an example shown without its output still has to run
        if "--json" in example.argv:
            json.loads(done.stdout)
        return
    assert _matches(expected, actual), (
        f"{example.id}: the docs show\n" + "\n".join(expected)
        + "\nbut heft prints\n" + "\n".join(actual)
    )


def test_the_matcher_can_fail() -> None:
    assert _matches(["a", "...", "d"], ["a", "b", "c", "d"])
    assert not _matches(["a", "...", "e"], ["a", "b", "c", "d"])
    assert not _matches(["a"], ["a", "b"])
