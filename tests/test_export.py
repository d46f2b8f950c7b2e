"""``heft export``: CSV and JSON Lines from a real SQLite file, filtered by time, job, verdict."""

from __future__ import annotations

import argparse
import csv
import io
import json
import subprocess
import sys
import time
from collections.abc import Iterator
from datetime import timedelta
from pathlib import Path

import pytest

from heft.daemon.config_example import example_toml
from heft.daemon.export import CSV_COLUMNS
from heft.daemon.measurement import Measurement, Verdict
from heft.daemon.storage import Store
from heft.tui.commands import export as export_cmd
from tests.sample_records import T0, make_measurement


def heft_export(*argv: str) -> int:
    """Run the sub-command exactly as ``heft export ...`` does (its own parser, no shell)."""
    parser = argparse.ArgumentParser(prog="heft")
    export_cmd.register(parser.add_subparsers(dest="command", required=True))
    args = parser.parse_args(["export", *argv])
    result: int = args.func(args)
    return result


@pytest.fixture
def db(tmp_path: Path) -> Iterator[tuple[Path, list[Measurement]]]:
    """Twelve clubs an hour apart from 08:00Z; jobs alternate; every third fails."""
    path = tmp_path / "bench-1.db"
    ms = [
        make_measurement(
            i,
            time_utc=T0 + timedelta(hours=i - 1),
            job="LC-2417" if i % 2 else "LC-2418",
            verdict=Verdict.FAIL if i % 3 == 0 else Verdict.PASS,
        )
        for i in range(1, 13)
    ]
    with Store(path) as store:
        for m in ms:
            store.add_measurement(m)
    yield path, ms


def _jsonl(text: str) -> list[Measurement]:
    return [Measurement.model_validate_json(line) for line in text.splitlines()]


def test_jsonl_is_the_stored_record(
    db: tuple[Path, list[Measurement]], capsys: pytest.CaptureFixture[str]
) -> None:
    path, ms = db
    assert heft_export("--db", str(path), "--format", "jsonl") == 0
    out, err = capsys.readouterr()
    assert _jsonl(out) == ms
    assert "12 measurements (jsonl)" in err


def test_csv_rows_and_columns(
    db: tuple[Path, list[Measurement]], capsys: pytest.CaptureFixture[str]
) -> None:
    path, ms = db
    assert heft_export("--db", str(path)) == 0  # csv is the default
    rows = list(csv.DictReader(io.StringIO(capsys.readouterr().out)))
    assert len(rows) == 12
    assert tuple(rows[0]) == CSV_COLUMNS
    for row, m in zip(rows, ms, strict=True):
        assert row["id"] == str(m.id)
        assert float(row["total_weight_g"]) == m.total_weight_g
        assert float(row["swingweight_points"]) == m.swingweight_points
        assert row["swingweight"] == m.swingweight
        assert row["verdict"] == m.verdict.value
        assert row["calibration_ids"] == "cal-beam-0-1"
    assert rows[2]["checks"] == "swingweight:fail"
    assert rows[0]["checks"] == ""


@pytest.mark.parametrize(
    ("filters", "seqs"),
    [
        (["--since", "2026-11-30T10:00:00Z", "--until", "2026-11-30T13:00:00Z"], [3, 4, 5]),
        (["--since", "2026-11-30T17:00:00+00:00"], [10, 11, 12]),
        (["--until", "2026-11-30T09:00Z"], [1]),
        (["--job", "LC-2418"], [2, 4, 6, 8, 10, 12]),
        (["--verdict", "fail"], [3, 6, 9, 12]),
        (["--verdict", "fail", "--job", "LC-2417"], [3, 9]),
        (["--verdict", "near_limit"], []),
        (["--station", "qc-1"], []),
    ],
)
def test_filters(
    db: tuple[Path, list[Measurement]],
    capsys: pytest.CaptureFixture[str],
    filters: list[str],
    seqs: list[int],
) -> None:
    path, _ = db
    assert heft_export("--db", str(path), "--format", "jsonl", *filters) == 0
    assert [m.seq for m in _jsonl(capsys.readouterr().out)] == seqs


def test_times_without_zone_are_local(
    db: tuple[Path, list[Measurement]],
    capsys: pytest.CaptureFixture[str],
    monkeypatch: pytest.MonkeyPatch,
) -> None:
    path, _ = db
    monkeypatch.setenv("TZ", "Etc/GMT-2")  # POSIX sign is inverted: this zone is UTC+2
    time.tzset()
    try:
        # 12:00 local = 10:00Z, 14:00 local = 12:00Z: seq 3 and 4.
        heft_export(
            "--db",
            str(path),
            "--format",
            "jsonl",
            "--since",
            "2026-11-30T12:00",
            "--until",
            "2026-11-30T14:00",
        )
    finally:
        monkeypatch.undo()
        time.tzset()
    assert [m.seq for m in _jsonl(capsys.readouterr().out)] == [3, 4]


def test_output_file_format_from_suffix(db: tuple[Path, list[Measurement]], tmp_path: Path) -> None:
    path, ms = db
    out = tmp_path / "week-48.jsonl"
    assert heft_export("--db", str(path), "-o", str(out), "--verdict", "pass") == 0
    assert _jsonl(out.read_text()) == [m for m in ms if m.verdict is Verdict.PASS]


def test_csv_defuses_spreadsheet_formulas(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    path = tmp_path / "inj.db"
    m = make_measurement(1).model_copy(update={"club_id": '=HYPERLINK("http://x")'})
    with Store(path) as store:
        store.add_measurement(m)
    heft_export("--db", str(path))
    row = next(csv.DictReader(io.StringIO(capsys.readouterr().out)))
    assert row["club_id"] == '\'=HYPERLINK("http://x")'
    heft_export("--db", str(path), "--format", "jsonl")  # JSONL keeps the exact value
    assert json.loads(capsys.readouterr().out)["club_id"] == m.club_id


def test_config_names_the_database(
    db: tuple[Path, list[Measurement]], tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    path, ms = db
    config = tmp_path / "station.toml"
    config.write_text(
        example_toml("two_support").replace('path = "heft.db"', f'path = "{path.name}"')
    )
    assert heft_export("--config", str(config), "--format", "jsonl") == 0
    assert _jsonl(capsys.readouterr().out) == ms


@pytest.mark.parametrize(
    ("argv", "names"),
    [
        (["--since", "yesterday"], "--since"),
        (["--until", "2026-13-01"], "--until"),
        (["--verdict", "maybe"], "--verdict"),
        (["--format", "xlsx"], "--format"),
    ],
)
def test_bad_options_exit_2_naming_the_option(
    db: tuple[Path, list[Measurement]],
    capsys: pytest.CaptureFixture[str],
    argv: list[str],
    names: str,
) -> None:
    path, _ = db
    with pytest.raises(SystemExit) as exit_info:
        heft_export("--db", str(path), *argv)
    assert exit_info.value.code == 2
    err = capsys.readouterr().err
    assert names in err
    assert len(err.strip().splitlines()[-1]) > 0


def test_missing_database_exits_2_and_creates_nothing(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    missing = tmp_path / "nope.db"
    with pytest.raises(SystemExit) as exit_info:
        heft_export("--db", str(missing))
    assert exit_info.value.code == 2
    assert "--db" in capsys.readouterr().err
    assert not missing.exists()


def test_an_unknown_output_suffix_is_refused_unless_a_format_is_given(
    db: tuple[Path, list[Measurement]], tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    # QA: -o out.xlsx silently wrote CSV into a file a spreadsheet then fails to open.
    path, ms = db
    out = tmp_path / "week-48.xlsx"
    with pytest.raises(SystemExit) as exit_info:
        heft_export("--db", str(path), "-o", str(out))
    assert exit_info.value.code == 2
    err = capsys.readouterr().err
    assert "--output" in err and "week-48.xlsx" in err and "--format" in err
    assert not out.exists()
    # Asked for by name, the format is written whatever the file is called.
    assert heft_export("--db", str(path), "-o", str(out), "--format", "jsonl") == 0
    assert _jsonl(out.read_text()) == ms


def test_a_reader_closing_the_pipe_is_a_quiet_end(db: tuple[Path, list[Measurement]]) -> None:
    # QA: `heft export ... | head` printed "--output: cannot write None: Broken pipe".
    path, _ = db
    proc = subprocess.Popen(
        [sys.executable, "-m", "heft.tui.cli", "export", "--db", str(path)],
        stdout=subprocess.PIPE, stderr=subprocess.PIPE,
    )
    assert proc.stdout is not None and proc.stderr is not None
    proc.stdout.close()  # the reader is gone before the first row is written
    err = proc.stderr.read().decode()
    assert proc.wait(timeout=60) == 0
    assert err == "", err
