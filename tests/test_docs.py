"""The README keeps telling the truth: its beam-protocol section matches the wire-format
contract, and every relative link in the docs points at a file that exists."""

from __future__ import annotations

import re
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def _section(text: str, start: str, stop: str) -> str:
    body = text[text.index(start) :]
    return body[: body.index(stop)].split("\n", 1)[1].strip()


def test_readme_beam_protocol_matches_docs_protocols() -> None:
    readme = (ROOT / "README.md").read_text(encoding="utf-8")
    contract = (ROOT / "docs" / "protocols.md").read_text(encoding="utf-8")
    in_readme = _section(readme, "### The heft beam protocol, version 1", "Reference firmware")
    in_contract = _section(contract, "## e. heft beam protocol, version 1", "## f. ")
    assert in_readme == in_contract, "README's beam protocol differs from docs/protocols.md e."


def test_relative_links_in_the_docs_resolve() -> None:
    link = re.compile(r"\]\(([^)#\s]+)(?:#[^)]*)?\)")
    missing: list[str] = []
    for doc in [ROOT / "README.md", ROOT / "DEVELOPERS.md", *sorted((ROOT / "docs").glob("*.md"))]:
        for target in link.findall(doc.read_text(encoding="utf-8")):
            if "://" in target or target.startswith("mailto:"):
                continue
            if not (doc.parent / target).exists():
                missing.append(f"{doc.relative_to(ROOT)} -> {target}")
    assert not missing, f"broken links: {missing}"
