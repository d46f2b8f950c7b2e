"""`heft simulate` as a person at a terminal uses it."""

from __future__ import annotations

import json
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest
import serial

from heft.drivers.sim.definitions import DEFINITIONS_DIR, PROTOCOLS
from heft.tui.cli import main


def test_list_shows_every_protocol(capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["simulate", "--list"]) == 0
    out = capsys.readouterr().out.splitlines()
    assert [line.split()[0] for line in out] == list(PROTOCOLS)


@pytest.mark.parametrize(
    ("argv", "named"),
    [
        (["beam", "--club-weight", "heavy"], "--club-weight"),
        (["beam", "--balance-point", "29.5furlong"], "--balance-point"),
        (["beam", "--supports", "36in,4in"], "--supports"),
        (["beam", "--geometry", "tripod"], "--geometry"),
        (["beam", "--cycle", "0"], "--cycle"),
        (["beam", "--duration", "inf"], "--duration"),
        (["beam", "--rate", "nan"], "--rate"),
        (["beam", "--rate", "20"], "--rate"),
        (["beam", "--link", "/nonexistent-dir/heft/beam0"], "--link"),
        (["beam", "--unit", "oz"], "--unit"),
        (["stream_balance", "--unit", "stone"], "--unit"),
        (["morse"], "PROTOCOL"),
        ([], "PROTOCOL"),
    ],
)
def test_bad_options_exit_2_naming_the_option(
    argv: list[str], named: str, capsys: pytest.CaptureFixture[str]
) -> None:
    try:
        code = main(["simulate", *argv])
    except SystemExit as exc:  # argparse's own error path
        code = int(exc.code or 0)
    assert code == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert named in err[-1]


def test_a_definition_of_another_spec_is_refused(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    raw = json.loads((DEFINITIONS_DIR / "scanner.json").read_text())
    raw["spec"] = 3
    path = tmp_path / "future.json"
    path.write_text(json.dumps(raw))
    assert main(["simulate", "--definition", str(path)]) == 2
    assert "spec 3 is not supported; this heft reads spec 1" in capsys.readouterr().err


def _interactive() -> None:
    # A shell without job control starts background jobs with SIGINT ignored, and Python keeps
    # an ignored SIGINT ignored; give the child the default a person at a terminal has.
    signal.signal(signal.SIGINT, signal.SIG_DFL)


def _start(args: list[str]) -> subprocess.Popen[str]:
    return subprocess.Popen(
        [sys.executable, "-m", "heft.tui.cli", "simulate", *args],
        stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, preexec_fn=_interactive,
    )


def test_serves_a_beam_on_the_printed_port_until_ctrl_c(tmp_path: Path) -> None:
    link = tmp_path / "beam0"
    proc = _start(["beam", "--link", str(link), "--seed", "3", "--cycle", "2",
                   "--club-weight", "13.76oz", "--balance-point", "749mm"])
    try:
        assert proc.stdout is not None
        first = proc.stdout.readline()
        assert first.startswith("beam device 'beam0' on /dev/pts/"), first
        port_path = first.rsplit(" ", 1)[1].strip()
        assert proc.stdout.readline().strip() == f"link {link} -> {port_path}"
        assert json.loads(proc.stdout.readline().split(":", 1)[1]) == {
            "driver": "beam", "port": str(link)}
        with serial.Serial(str(link), timeout=0.5) as port:
            port.write(b"!ID\n")
            deadline = time.monotonic() + 10
            got: list[bytes] = []
            while time.monotonic() < deadline and not any(
                    x.startswith(b"#HELLO heft-beam/1") for x in got):
                got.append(port.readline())
            assert any(x.startswith(b"#HELLO heft-beam/1") for x in got)
        proc.send_signal(signal.SIGINT)
        assert proc.wait(timeout=20) == 0
        assert not link.exists()
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait()


def test_unit_option_sets_the_display_unit(tmp_path: Path) -> None:
    link = tmp_path / "sb"
    proc = _start(["stream_balance", "--unit", "oz", "--link", str(link), "--duration", "8"])
    try:
        assert proc.stdout is not None
        proc.stdout.readline()
        with serial.Serial(str(link), timeout=2) as port:
            port.readline()  # maybe cut by the flush on open
            assert port.readline().endswith(b"  oz\r\n")
    finally:
        proc.send_signal(signal.SIGTERM)
        assert proc.wait(timeout=20) == 0
        assert not link.exists()  # SIGTERM also stops it cleanly


def test_duration_stops_by_itself() -> None:
    proc = _start(["scanner", "--duration", "0.5"])
    out, err = proc.communicate(timeout=20)
    assert proc.returncode == 0, err
    assert out.startswith("scanner device 'scanner0' on /dev/pts/")


def test_link_never_replaces_a_users_file(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    notes = tmp_path / "notes.txt"
    notes.write_text("important\n")
    with pytest.raises(SystemExit) as stop:
        main(["simulate", "scanner", "--link", str(notes), "--duration", "1"])
    assert stop.value.code == 2
    assert "--link" in capsys.readouterr().err
    assert notes.read_text() == "important\n"
    # A stale link to a pseudo-terminal from an earlier run is fine to replace.
    stale = tmp_path / "beam0"
    stale.symlink_to("/dev/pts/999")
    assert main(["simulate", "scanner", "--link", str(stale), "--duration", "0.5"]) == 0
