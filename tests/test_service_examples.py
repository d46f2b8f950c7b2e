"""The shipped examples run exactly as their headers say, and their simulated club passes.

Each example's header gives `heft simulate ...` and `heft run ...` command lines. This runs
those very lines (real processes, real ptys, real SQLite), only with the example's fixed
/tmp/heft-sim paths moved under the test's tmp_path, and waits for a stored measurement.
Check values: the club the header's command lines simulate (405 g, balance point 29.2 in) and its
swing weight from the Lorythmic definition in domain.md, M14 = 6156 g*in = D2.1 (derived), inside
the examples' D2 ± 0.5 spec.
"""

from __future__ import annotations

import re
import shlex
import subprocess
import sys
import time
from collections.abc import Iterator
from pathlib import Path

import pytest

from heft.daemon.config import load_config
from heft.daemon.measurement import Verdict
from heft.daemon.physics.swingweight import points_from_moment_g_in
from heft.daemon.storage import Store
from tests.processes import stop_processes

ROOT = Path(__file__).resolve().parent.parent
EXAMPLES = sorted((ROOT / "examples").glob("*.toml"))
SIM_DIR = "/tmp/heft-sim"
CLUB_WEIGHT_G, CLUB_BP_IN = 405.0, 29.2  # what the headers' command lines simulate


def header_commands(example: Path) -> list[list[str]]:
    """The `heft ...` command lines of the header (continuations joined, `&` dropped)."""
    lines: list[str] = []
    for raw in example.read_text().splitlines():
        if not raw.startswith("#"):
            break
        text = raw.lstrip("#").strip()
        if lines and lines[-1].endswith("\\"):
            lines[-1] = lines[-1][:-1] + " " + text
        elif text.startswith(("heft ", "mkdir ")):
            lines.append(text)
    return [shlex.split(line.removesuffix("&")) for line in lines if line.startswith("heft ")]


@pytest.fixture
def processes() -> Iterator[list[subprocess.Popen[bytes]]]:
    started: list[subprocess.Popen[bytes]] = []
    yield started
    stop_processes(started, timeout_s=20)


def test_the_simulated_club_is_inside_the_spec() -> None:
    # 405 g x (29.2 - 14) in = 6156 g*in; D2 = 217 oz*in = 6151.8 g*in (domain.md): D2.1.
    points = points_from_moment_g_in(CLUB_WEIGHT_G * (CLUB_BP_IN - 14.0))
    assert points == pytest.approx(32.08, abs=0.01)
    for example in EXAMPLES:
        text = example.read_text()
        assert "--club-weight 405g" in text, example.name
        assert "To see a fail" in text, example.name


@pytest.mark.parametrize("example", EXAMPLES, ids=lambda p: p.name)
def test_example_runs_as_its_header_says(
    example: Path, tmp_path: Path, processes: list[subprocess.Popen[bytes]]
) -> None:
    sim_dir = tmp_path / "heft-sim"
    sim_dir.mkdir()
    config = tmp_path / example.name
    config.write_text(example.read_text().replace(SIM_DIR, str(sim_dir)))
    commands = header_commands(example)
    assert [c[1] for c in commands][-1] == "run" and len(commands) >= 2
    for argv in commands:
        argv = [str(sim_dir) + a[len(SIM_DIR):] if a.startswith(SIM_DIR) else a for a in argv]
        if argv[1] == "run":
            argv[argv.index("--config") + 1] = str(config)
        processes.append(subprocess.Popen(
            [sys.executable, "-m", "heft.tui.cli", *argv[1:]], cwd=ROOT,
            stdout=subprocess.DEVNULL, stderr=subprocess.PIPE if argv[1] == "run" else None,
        ))
    run = processes[-1]
    assert run.stderr is not None
    deadline = time.monotonic() + 90
    log = ""
    while "club #1 " not in log:
        line = run.stderr.readline().decode()
        assert line, f"heft run ended: {log}"
        log += line
        assert time.monotonic() < deadline, f"no capture within 90 s: {log}"
    with Store(load_config(config).storage.path) as store:
        (m, *_) = list(store.measurements())
    assert m.total_weight_g == pytest.approx(CLUB_WEIGHT_G, abs=0.5)
    assert m.balance_point_in == pytest.approx(CLUB_BP_IN, abs=0.05)
    assert m.verdict is Verdict.PASS, m.checks
    if load_config(config).geometry.type == "single_scale":
        # The balance point came with the club id on the scanned card.
        assert m.club_id is not None and re.fullmatch(r"LCW-\d{4}", m.club_id), m.club_id
