"""``heft report`` on the command line: options, messages, exit codes, and the demo's store."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import pypdfium2 as pdfium
import pytest

from heft.daemon.storage import Store
from heft.tui.cli import main
from tests.report_records import larkspur_store
from tests.test_cli_imports import _modules_after


@pytest.fixture
def db(tmp_path: Path) -> Path:
    return larkspur_store(tmp_path / "heft.db")


def _refused(capsys: pytest.CaptureFixture[str], *argv: str) -> str:
    """Run ``heft report ARGV``, expect exit 2, return the error line."""
    with pytest.raises(SystemExit) as stop:
        main(["report", *argv])
    assert stop.value.code == 2
    lines = [line for line in capsys.readouterr().err.splitlines() if "error:" in line]
    assert len(lines) == 1
    return lines[0]


@pytest.mark.parametrize(
    ("argv", "option", "expected"),
    [
        (["--tz", "Mars/Olympus"], "--tz", "IANA time zone"),
        (["--since", "yesterday"], "--since", "ISO 8601"),
        (["--since", "2026-12-01", "--until", "2026-11-30"], "--until", "after --since"),
        (["-o", "{tmp}/r.docx"], "-o/--output", ".html or .pdf"),
        (["-o", "{tmp}/no/such/folder/r.pdf"], "-o/--output", "no folder"),
        (["--db", "{tmp}/missing.db"], "--db", "no database file"),
        (["--format", "png"], "--format", "invalid choice"),
    ],
)
def test_bad_input_names_the_option_and_exits_2(
    db: Path, tmp_path: Path, capsys: pytest.CaptureFixture[str],
    argv: list[str], option: str, expected: str,
) -> None:  # fmt: skip
    given = [a.replace("{tmp}", str(tmp_path)) for a in argv]
    base = {"--db": str(db), "-o": str(tmp_path / "r.html")}
    for name, value in base.items():
        if name not in given:
            given = [name, value, *given]
    line = _refused(capsys, *given)
    assert option in line and expected in line


def test_no_matching_measurements_is_a_clear_message_and_exit_1(
    db: Path, tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    out = tmp_path / "r.html"
    assert main(["report", "--db", str(db), "--job", "LCW-9999", "-o", str(out)]) == 1
    err = capsys.readouterr().err
    expected = f"heft report: no measurements in {db} match --job LCW-9999; nothing to report"
    assert err.strip() == expected
    assert not out.exists()
    Store(tmp_path / "empty.db").close()
    assert main(["report", "--db", str(tmp_path / "empty.db"), "-o", str(out)]) == 1
    assert "no measurements in" in capsys.readouterr().err


def test_format_from_the_suffix_or_the_option(
    db: Path, tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    page = tmp_path / "LCW-2611.HTM"
    assert main(["report", "--db", str(db), "-o", str(page), "--tz", "Europe/London"]) == 0
    assert page.read_text(encoding="utf-8").startswith("<!DOCTYPE html>")
    assert "7 clubs, 6 pass, 1 near limit, 0 fail" in capsys.readouterr().out
    forced = tmp_path / "LCW-2611.out"
    assert main(["report", "--db", str(db), "-o", str(forced), "--format", "pdf"]) == 0
    assert forced.read_bytes().startswith(b"%PDF-")


def test_filters_choose_the_records(db: Path, tmp_path: Path) -> None:
    # The set is captured 08:00:40 .. 08:04:40 UTC on 30 Nov and the 8-iron again at 08:10;
    # 09:03 in Berlin (CET = UTC+1, IANA tz database) is 08:03 UTC: from there, 3 clubs.
    out = tmp_path / "late.html"
    argv = ["report", "--db", str(db), "-o", str(out), "--tz", "Europe/Berlin",
            "--since", "2026-11-30T09:03", "--station", "bench-1"]  # fmt: skip
    assert main(argv) == 0
    page = out.read_text(encoding="utf-8")
    assert "LCW-2611-8I" in page and "LCW-2611-9I" in page and "LCW-2611-PW" in page
    assert "LCW-2611-7I" not in page and "LCW-2611-4I" not in page
    assert "from 2026-11-30 09:03" in page and "station bench-1" in page


def test_report_imports_no_heavy_library_until_it_renders(tmp_path: Path) -> None:
    loaded = _modules_after("report", "--db", str(tmp_path / "none.db"), "-o", "x.pdf")
    assert "heft.tui.commands.report" in loaded
    heavy = {"matplotlib", "weasyprint", "jinja2", "numpy"}
    assert not {m for m in loaded for h in heavy if m == h or m.startswith(h + ".")}


def _heft(*args: str, timeout: float) -> subprocess.CompletedProcess[str]:
    return subprocess.run(
        [sys.executable, "-m", "heft.tui.cli", *args], capture_output=True, text=True,
        timeout=timeout, check=False,
    )  # fmt: skip


def test_report_on_the_store_the_demo_kept(tmp_path: Path) -> None:
    db = tmp_path / "demo.db"
    demo = _heft("demo", "--headless-seconds", "14", "--db", str(db), timeout=120)
    assert demo.returncode == 0, demo.stderr
    assert f"store kept at {db}" in demo.stdout
    with Store(db) as store:
        stored = list(store.measurements())
    assert stored, "the demo captured no club in 14 s"
    out = tmp_path / "demo.pdf"
    done = _heft("report", "--db", str(db), "-o", str(out), "--tz", "Europe/London",
                 timeout=120)  # fmt: skip
    assert done.returncode == 0, done.stderr
    n = len({m.club_id for m in stored})
    assert f"{n} club{'s' if n != 1 else ''}," in done.stdout
    doc = pdfium.PdfDocument(out)
    try:
        text = " ".join(" ".join(p.get_textpage().get_text_range().split()) for p in doc)
    finally:
        doc.close()
    for m in stored:
        assert m.club_id is not None and m.club_id in text
        assert m.verdict.value.replace("_", " ").upper() in text
    # The demo's seeded span records are the calibration chain behind its numbers.
    assert "demo-0-span" in text and "demo-1-span" in text and "LCW-REF-1000" in text
    assert "k = 2" in text and "JCGM 100:2008" in text
