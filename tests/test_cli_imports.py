"""Each command imports only what it uses (start-up time; the figure is in tests/bench/)."""

from __future__ import annotations

import json
import os
import subprocess
import sys

import pytest

from heft.tui.cli import COMMAND_MODULES, commands_to_load

_PROBE = """
import contextlib, io, json, sys
from heft.tui.cli import main
with contextlib.redirect_stdout(io.StringIO()):
    try:
        main(sys.argv[1:])
    except SystemExit:
        pass
print(json.dumps(sorted(sys.modules)))
"""


def _modules_after(*argv: str) -> set[str]:
    done = subprocess.run(
        [sys.executable, "-c", _PROBE, *argv], capture_output=True, text=True, timeout=60,
        check=False,
    )  # fmt: skip
    assert done.returncode == 0, done.stderr
    return set(json.loads(done.stdout.splitlines()[-1]))


def test_calc_imports_no_service_dashboard_or_simulator() -> None:
    loaded = _modules_after("calc", "--weight", "405g", "--balance-point", "29.2in")
    assert "heft.tui.commands.calc" in loaded  # the probe did run calc
    heavy = {"asyncio", "textual", "serial", "usb", "aiomqtt", "sqlite3",
             "heft.daemon.service", "heft.drivers.sim", "heft.tui.commands.demo"}  # fmt: skip
    found = {m for m in loaded for h in heavy if m == h or m.startswith(h + ".")}
    assert not found


def test_version_imports_no_command() -> None:
    loaded = _modules_after("--version")
    assert not {m for m in loaded if m.startswith("heft.tui.commands.")}


@pytest.mark.parametrize(
    ("argv", "expected"),
    [
        (["calc", "--weight", "1g"], ("calc",)),
        (["--version"], ()),
        (["--help"], COMMAND_MODULES),
        (["calx"], COMMAND_MODULES),
        ([], COMMAND_MODULES),
        (["run", "--help"], ("run",)),
    ],
)
def test_commands_to_load(argv: list[str], expected: tuple[str, ...]) -> None:
    assert commands_to_load(argv) == expected


@pytest.mark.parametrize("argv", [["schema"], ["schema", "measurement"], ["config", "example"]])
def test_a_reader_that_has_gone_is_a_quiet_end(argv: list[str]) -> None:
    """``heft schema | head -1``: the command ends quietly, no BrokenPipeError traceback.

    The pipe's reading end is closed before the command starts, so its first write fails
    (EPIPE) every time, however small the output is.
    """
    read_end, write_end = os.pipe()
    os.close(read_end)
    try:
        done = subprocess.run(
            [sys.executable, "-m", "heft.tui.cli", *argv], stdout=write_end,
            stderr=subprocess.PIPE, text=True, timeout=60, check=False,
        )  # fmt: skip
    finally:
        os.close(write_end)
    assert done.returncode == 0, done.stderr
    assert "Traceback" not in done.stderr and "BrokenPipe" not in done.stderr, done.stderr
