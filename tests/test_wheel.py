"""The built wheel, installed into a clean virtual environment, runs every command.

A copy of the checkout is built into a wheel (pip, with build isolation, as a user's ``pip install
./heft`` does), installed into a new venv with nothing of the checkout on the path, and every
command is run from an unrelated folder: the way a bench is set up from the docs, including the
shipped systemd unit's ExecStartPre and ExecStart lines. Real processes, real ptys, real SQLite.

Check values: the simulated club, 405 g balancing at 29.2 in, has M14 = 405 g x 15.2 in =
6156 g*in (textbook statics), D2.1 on the Lorythmic scale (A0 = 161 oz*in, 1.75 oz*in a point:
domain.md).
"""

from __future__ import annotations

import csv
import io
import json
import shlex
import signal
import subprocess
import time
import zipfile
from collections.abc import Iterator
from pathlib import Path

import pytest

from tests.processes import stop_processes
from tests.wheel_env import Installed, install_wheel

ROOT = Path(__file__).resolve().parent.parent
UNIT_FILE = ROOT / "deploy" / "heft.service"

pytestmark = pytest.mark.timeout(900)


@pytest.fixture(scope="module")
def installed(tmp_path_factory: pytest.TempPathFactory) -> Installed:
    return install_wheel(tmp_path_factory.mktemp("wheel"))


def test_the_wheel_claims_only_the_heft_name(installed: Installed) -> None:
    with zipfile.ZipFile(installed.wheel) as wheel:
        tops = {name.split("/")[0] for name in wheel.namelist()}
    assert tops == {"heft", installed.wheel.name.split("-py")[0] + ".dist-info"}, tops


def test_the_package_comes_from_the_venv_not_the_checkout(installed: Installed) -> None:
    done = subprocess.run(
        [str(installed.bin / "python"), "-c",
         "import heft.daemon, sys, importlib.util as u; print(heft.daemon.__path__[0]);"
         "print(u.find_spec('daemon'), u.find_spec('drivers'), u.find_spec('tui'))"],
        capture_output=True, text=True, cwd=installed.cwd, env=installed.env, check=False,
    )  # fmt: skip
    assert done.returncode == 0, done.stderr
    where, generic = done.stdout.splitlines()
    assert Path(where).is_relative_to(installed.bin.parent), where
    assert not Path(where).is_relative_to(ROOT)
    assert generic == "None None None"


def test_version_calc_schema_devices(installed: Installed) -> None:
    from heft.daemon.version import __version__

    assert installed.heft("--version").stdout.strip() == f"heft {__version__}"
    calc = installed.heft("calc", "--weight", "405g", "--balance-point", "29.2in", "--json")
    assert calc.returncode == 0, calc.stderr
    # 405 g x (29.2 - 14) in = 6156 g*in (textbook statics): D2.1 (Lorythmic scale, domain.md).
    assert json.loads(calc.stdout)["swingweight"] == "D2.1"
    schema = installed.heft("schema", "measurement")
    assert schema.returncode == 0, schema.stderr
    assert json.loads(schema.stdout)["type"] == "object"
    devices = installed.heft("devices")
    assert devices.returncode == 0, devices.stderr


def test_config_example_piped_into_config_check(installed: Installed) -> None:
    example = installed.heft("config", "example")
    assert example.returncode == 0, example.stderr
    check = installed.heft("config", "check", "-", stdin=example.stdout)
    assert check.returncode == 0, check.stderr


def test_demo_starts_and_quits_headless(installed: Installed) -> None:
    done = installed.heft("demo", "--headless-seconds", "4")
    assert done.returncode == 0, done.stderr
    assert "clubs captured" in done.stdout and "ui errors 0" in done.stdout


@pytest.fixture
def simulated_bench(installed: Installed, tmp_path: Path) -> Iterator[Path]:
    """A simulated beam and scanner on ptys, served by the installed heft; yields a config."""
    sim = tmp_path / "sim"
    sim.mkdir()
    processes: list[subprocess.Popen[str]] = [
        installed.start("simulate", "beam", "--club-weight", "405g", "--balance-point", "29.2in",
                        "--cycle", "4", "--link", str(sim / "beam")),
        installed.start("simulate", "scanner", "--link", str(sim / "scanner")),
    ]  # fmt: skip
    config = tmp_path / "station.toml"
    example = (ROOT / "examples" / "bench-1-two-support.toml").read_text(encoding="utf-8")
    config.write_text(
        example.replace("/tmp/heft-sim/bench-1.db", str(tmp_path / "station.db")).replace(
            "/tmp/heft-sim", str(sim)
        ),
        encoding="utf-8",
    )
    yield config
    stop_processes(processes, timeout_s=20)


def _unit_line(key: str, config: Path, installed: Installed) -> list[str]:
    """The unit file's ``key=`` command line, with the install's paths put in."""
    (line,) = [
        raw.split("=", 1)[1]
        for raw in UNIT_FILE.read_text(encoding="utf-8").splitlines()
        if raw.startswith(f"{key}=")
    ]
    argv = shlex.split(line)
    assert argv[0] == "/usr/local/bin/heft", "the unit runs the pip-installed script"
    return [str(installed.bin / "heft"), *[str(config) if a.endswith(".toml") else a
                                           for a in argv[1:]]]  # fmt: skip


def _run_until_captured(argv: list[str], installed: Installed, db: Path) -> str:
    """Run ``heft run``; once a club is stored, SIGTERM it; return its log."""
    proc = subprocess.Popen(
        argv, cwd=installed.cwd, env=installed.env, text=True,
        stdout=subprocess.DEVNULL, stderr=subprocess.PIPE,
    )  # fmt: skip
    try:
        deadline = time.monotonic() + 120
        while time.monotonic() < deadline:
            rows = installed.heft("export", "--db", str(db)) if db.exists() else None
            if rows is not None and rows.returncode == 0 and len(rows.stdout.splitlines()) > 1:
                break
            assert proc.poll() is None, f"heft run ended early: {proc.communicate()[1]}"
            time.sleep(1.0)
        else:
            pytest.fail("no club captured within 120 s")
        proc.send_signal(signal.SIGTERM)
        _, log = proc.communicate(timeout=30)
    finally:
        stop_processes([proc], timeout_s=10)
    assert proc.returncode == 0, log
    return log


def test_station_runs_under_the_unit_files_lines(
    installed: Installed, simulated_bench: Path, tmp_path: Path
) -> None:
    config = simulated_bench
    pre = subprocess.run(
        _unit_line("ExecStartPre", config, installed), capture_output=True, text=True,
        cwd=installed.cwd, env=installed.env, timeout=60, check=False,
    )  # fmt: skip
    assert pre.returncode == 0, pre.stderr
    _run_until_captured(_unit_line("ExecStart", config, installed), installed,
                        tmp_path / "station.db")  # fmt: skip
    export = installed.heft("export", "--db", str(tmp_path / "station.db"))
    (row, *_) = list(csv.DictReader(io.StringIO(export.stdout)))
    weight_g = float(row["total_weight_g"])
    assert weight_g == pytest.approx(405.0, abs=0.5)

    # A second run records the device bytes; heft replay turns them back into the measurement.
    record = tmp_path / "recorded"
    _run_until_captured(
        [str(installed.bin / "heft"), "run", "--config", str(config), "--db",
         str(tmp_path / "second.db"), "--record", str(record)],
        installed, tmp_path / "second.db",
    )  # fmt: skip
    replayed = installed.heft("replay", "--config", str(config), str(record / "beam.jsonl"),
                              str(record / "scanner.jsonl"))  # fmt: skip
    assert replayed.returncode == 0, replayed.stderr
    first = json.loads(replayed.stdout.splitlines()[0])
    assert first["total_weight_g"] == pytest.approx(405.0, abs=0.5)
    assert first["swingweight"] == "D2.1"
