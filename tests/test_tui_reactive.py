"""State reaches the widgets through reactives and messages: at once, and only when it changed.

The dashboard has no redraw timer. These tests push events into a running app (Textual's
headless pilot) and look at the widgets after the queued messages have run, with no time
allowed to pass; and they count the refreshes of every widget to show that an idle dashboard,
or an event that changes nothing on screen, redraws nothing.
"""

from __future__ import annotations

from collections import Counter
from collections.abc import Callable
from datetime import timedelta
from typing import Any

from textual.pilot import Pilot
from textual.timer import Timer
from textual.widget import Widget
from textual.widgets import Static

from heft.daemon.events import (
    Alarm,
    AlarmChanged,
    AlarmKind,
    CaptureState,
    CaptureStateChanged,
    DeviceStatus,
    LiveReading,
    MeasurementCaptured,
)
from heft.drivers.reading import Flag
from heft.tui.app import HeftDashboard
from heft.tui.readout import AlarmBanner, CaptureLine, VerdictBanner
from heft.tui.scripted_bench import (
    JOBS,
    START_UTC,
    STATION,
    make_measurement,
    out_of_spec_event,
    session_events,
)
from heft.tui.source import ScriptedSource
from heft.tui.tables import DevicesTable, MeasurementsTable
from tests.test_tui_app import SIZE, settle, until_idle


def running_timers(app: HeftDashboard) -> list[str]:
    """Names of the timers running on the app and every widget.

    Textual's own frame pacing ("screen_update", paused while nothing is dirty) is left out:
    it draws what was marked dirty, it does not ask whether anything changed.
    """
    nodes: list[Any] = [app, *app.screen_stack, *app.screen.walk_children(with_self=False)]
    timers: list[Timer] = [t for node in nodes for t in getattr(node, "_timers", ())]
    return [t.name for t in timers if t.name != "screen_update" and t._active.is_set()]


def count_refreshes(app: HeftDashboard) -> Counter[Widget]:
    """Count every ``refresh()`` of every widget on the screen from now on."""
    counts: Counter[Widget] = Counter()

    def counting(widget: Widget) -> Callable[..., Widget]:
        original = widget.refresh

        def refresh(*args: Any, **kwargs: Any) -> Widget:
            counts[widget] += 1
            return original(*args, **kwargs)

        return refresh

    for widget in app.screen.query(Widget):
        widget.refresh = counting(widget)  # type: ignore[method-assign]
    return counts


async def drawn_session(pilot: Pilot[None], app: HeftDashboard) -> None:
    await settle(pilot, app, lambda: len(app.state.measurements) == 7)
    await settle(pilot, app, lambda: len(app.query(".channel-value")) == 2)
    await pilot.pause(0.3)


def live(channel: str, value_g: float, t_mono_s: float = 3000.0) -> LiveReading:
    return LiveReading(station=STATION, channel=channel, t_mono_s=t_mono_s, value_g=value_g,
                       flags=Flag.STABLE)


async def test_each_kind_of_event_reaches_its_widget_without_a_timer() -> None:
    source = ScriptedSource(session_events(), jobs=JOBS)
    app = HeftDashboard(source)
    async with app.run_test(size=SIZE) as pilot:
        await drawn_session(pilot, app)
        assert running_timers(app) == []  # nothing could redraw on a clock

        capture = app.query_one(CaptureLine)
        source.push(CaptureStateChanged(station=STATION, state=CaptureState.SETTLING,
                                        t_mono_s=3000.0),
                    live("beam/0", 150.0), live("beam/1", 250.5))
        await until_idle(pilot, lambda: "SETTLING" in str(capture.render()))
        assert "(load 400.5 g)" in str(capture.render())  # the load now, from the live values
        cell = app.query_one("#ch-beam-1 .channel-value", Static)
        assert "250.50 g stable" in str(cell.render())

        source.push(live("beam/1", 260.0, 3000.1))
        await until_idle(pilot, lambda: "(load 410.0 g)" in str(capture.render()))

        alarm = Alarm(station=STATION, kind=AlarmKind.OVERLOAD, source="beam/1", active=True,
                      message="beam/1 above its rated capacity",
                      time_utc=START_UTC + timedelta(hours=1))  # the newest: the banner's first
        source.push(AlarmChanged(alarm=alarm))
        banner = app.query_one(AlarmBanner)
        await until_idle(pilot, lambda: "OVERLOAD" in str(banner.render()))

        devices = app.query_one(DevicesTable)
        source.push(DeviceStatus(station=STATION, device="scale", connected=True,
                                 port="/dev/heft-scale"))
        await until_idle(pilot, lambda: devices.row_count == 3)

        source.push(out_of_spec_event(seq=42))
        verdict = app.query_one(VerdictBanner)
        club_line = app.query_one("#club-line", Static)
        await until_idle(pilot, lambda: "#42 7i" in str(verdict.render()))
        assert "#42" in str(club_line.render())
        assert app.query_one(MeasurementsTable).row_count == 8
        assert running_timers(app) == []
        assert app.ui_errors == 0


async def test_an_idle_dashboard_redraws_nothing() -> None:
    app = HeftDashboard(ScriptedSource(session_events(), jobs=JOBS))
    async with app.run_test(size=SIZE) as pilot:
        await drawn_session(pilot, app)
        for tab in "1234":  # each tab in turn, with nothing arriving
            await pilot.press(tab)
            await pilot.pause(0.2)
            counts = count_refreshes(app)
            await pilot.pause(1.0)  # ten ticks of the 10 Hz timer this dashboard used to have
            assert sum(counts.values()) == 0, (tab, counts)


async def test_events_that_change_nothing_shown_redraw_nothing() -> None:
    events = session_events()
    source = ScriptedSource(events, jobs=JOBS)
    app = HeftDashboard(source)
    async with app.run_test(size=SIZE) as pilot:
        await drawn_session(pilot, app)
        counts = count_refreshes(app)
        applied = app.state.events_applied
        last_device = next(e for e in reversed(events) if isinstance(e, DeviceStatus))
        again = make_measurement(7, "PW", 449.7, 32.0)  # the session's last club again, same id
        source.push(last_device, MeasurementCaptured(measurement=again))
        await settle(pilot, app, lambda: app.state.events_applied == applied + 2)
        await pilot.pause(0.3)
        assert sum(counts.values()) == 0, counts


async def test_a_live_reading_redraws_its_channel_and_device_only() -> None:
    source = ScriptedSource(session_events(), jobs=JOBS)
    app = HeftDashboard(source)
    async with app.run_test(size=SIZE) as pilot:
        await drawn_session(pilot, app)
        counts = count_refreshes(app)
        cell = app.query_one("#ch-beam-0 .channel-value", Static)
        source.push(live("beam/0", 123.45))
        await until_idle(pilot, lambda: "123.45 g" in str(cell.render()))
        await pilot.pause(0.3)
        redrawn = set(counts)
        assert cell in redrawn
        devices = app.query_one(DevicesTable)
        untouched = [
            devices,  # on another tab: its last-reading cell catches up when it is shown
            app.query_one(VerdictBanner),
            app.query_one(AlarmBanner),
            app.query_one(CaptureLine),  # HOLDING: the line does not show the load
            app.query_one(MeasurementsTable),
            app.query_one("#ch-beam-1 .channel-value"),
            *app.query("#readout Static"),
            *app.query("ToleranceGauge"),
            *app.query("#set-view *"),
            *app.query("AlarmsTable"),
        ]
        assert [w for w in untouched if w in redrawn] == []
        reading = devices.ordered_columns[5].key
        await pilot.press("3")
        await until_idle(pilot, lambda: devices.get_cell("beam", reading) == "123.45 g")
        source.push(live("beam/0", 130.0, 3000.1))  # on its tab it follows at once
        await until_idle(pilot, lambda: devices.get_cell("beam", reading) == "130.00 g")
