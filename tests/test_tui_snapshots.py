"""SVG snapshots of the dashboard's screens at 120x40 (and 80x24), from the fixed scripted session.

Regenerate after an intended change with ``pytest tests/test_tui_snapshots.py --snapshot-update``
and look at the SVGs before committing them (textual is pinned in pyproject.toml).
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

from textual.pilot import Pilot

from heft.daemon.command_api import Command, Reply, VerifyCheckMass
from heft.tui.app import HeftDashboard
from heft.tui.calibration import CalibrationScreen
from heft.tui.scripted_bench import JOBS, session_events
from heft.tui.source import ScriptedSource

SIZE = (120, 40)
Snap = Callable[..., bool]


def _reply(cmd: Command) -> Reply:
    if isinstance(cmd, VerifyCheckMass):
        return Reply(
            ok=True,
            command=cmd.command,
            data={"result_g": 199.98, "residual_g": -0.02, "tolerance_g": 0.1, "passed": True,
                  "next_due": "2026-06-12", "calibration_id": "cal-beam0-0314"},
        )
    return Reply(ok=True, command=cmd.command)


def _app() -> HeftDashboard:
    return HeftDashboard(ScriptedSource(session_events(), jobs=JOBS, reply=_reply))


async def _replayed(pilot: Pilot[Any]) -> None:
    """Wait until the whole session is folded in and drawn."""
    app = pilot.app
    assert isinstance(app, HeftDashboard)
    for _ in range(200):
        if len(app.state.measurements) == 7 and app.source.inbox.empty():
            break
        await pilot.pause(0.05)
    for _ in range(100):  # the channel rows are mounted as the readings arrive
        await pilot.pause(0.02)
        rows = app.query(".channel-value")
        if rows and all(str(r.render()).strip() != "-" for r in rows):
            break
    await pilot.pause(0.2)


async def _step(pilot: Pilot[Any], step: str) -> None:
    """Wait until the calibration screen shows ``step``."""
    for _ in range(200):
        screen = pilot.app.screen
        if isinstance(screen, CalibrationScreen) and screen.step == step and not screen.busy:
            return
        await pilot.pause(0.02)
    raise AssertionError(f"calibration never reached {step}")


def test_live_screen(snap_compare: Snap) -> None:
    assert snap_compare(_app(), terminal_size=SIZE, run_before=_replayed)


async def _set_tab(pilot: Pilot[Any]) -> None:
    await _replayed(pilot)
    await pilot.press("2")
    await pilot.pause(0.2)


def test_set_screen(snap_compare: Snap) -> None:
    assert snap_compare(_app(), terminal_size=SIZE, run_before=_set_tab)


def test_devices_screen(snap_compare: Snap) -> None:
    async def go(pilot: Pilot[Any]) -> None:
        await _replayed(pilot)
        await pilot.press("3")

    assert snap_compare(_app(), terminal_size=SIZE, run_before=go)


def test_alarms_screen(snap_compare: Snap) -> None:
    async def go(pilot: Pilot[Any]) -> None:
        await _replayed(pilot)
        await pilot.press("4")

    assert snap_compare(_app(), terminal_size=SIZE, run_before=go)


def test_calibration_result_screen(snap_compare: Snap) -> None:
    async def go(pilot: Pilot[Any]) -> None:
        await _replayed(pilot)
        await pilot.press("c")
        await _step(pilot, "step-pick")
        await pilot.press("enter", "enter")
        await _step(pilot, "step-span")
        await pilot.press(*"500", "tab", "tab", *"R-500-07", "enter")
        await _step(pilot, "step-verify")
        await pilot.press(*"200", "enter")
        await _step(pilot, "step-result")

    assert snap_compare(_app(), terminal_size=SIZE, run_before=go)


def test_help_screen(snap_compare: Snap) -> None:
    async def go(pilot: Pilot[Any]) -> None:
        await _replayed(pilot)
        await pilot.press("question_mark")
        await pilot.pause(0.2)

    assert snap_compare(_app(), terminal_size=SIZE, run_before=go)


SMALL = (80, 24)  # the smallest terminal the dashboard is laid out for


def test_live_screen_at_80x24(snap_compare: Snap) -> None:
    assert snap_compare(_app(), terminal_size=SMALL, run_before=_replayed)


def test_set_screen_at_80x24(snap_compare: Snap) -> None:
    assert snap_compare(_app(), terminal_size=SMALL, run_before=_set_tab)
