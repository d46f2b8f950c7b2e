"""The dashboard under Textual's headless pilot, fed by a scripted replay of events."""

from __future__ import annotations

import asyncio
from collections.abc import Callable
from pathlib import Path

import pytest
from textual.pilot import Pilot
from textual.widgets import ContentSwitcher, Static

from heft.daemon.command_api import (
    AcknowledgeAlarm,
    CalibrateSpan,
    CalibrateZero,
    Command,
    Rearm,
    Reply,
    SelectJob,
    VerifyCheckMass,
)
from heft.daemon.events import EventBus, LiveReading, MeasurementCaptured
from heft.drivers.reading import Flag
from heft.tui.app import HeftDashboard
from heft.tui.calibration import CalibrationScreen
from heft.tui.format import READ_ONLY_HINT
from heft.tui.mqtt_source import MqttSource
from heft.tui.readout import AlarmBanner, VerdictBanner, split_label
from heft.tui.scripted_bench import (
    JOBS,
    STATION,
    make_measurement,
    out_of_spec_event,
    session_events,
)
from heft.tui.source import InProcessSource, ScriptedSource
from heft.tui.tables import AlarmsTable, MeasurementsTable

SIZE = (120, 40)


async def settle(pilot: Pilot[None], app: HeftDashboard, until: Callable[[], bool]) -> None:
    """Pause until ``until()`` holds (generous limit: the machine is shared and slow)."""
    for _ in range(200):
        if until():
            return
        await pilot.pause(0.05)
    raise AssertionError("condition not reached within 10 s")


async def until_idle(pilot: Pilot[None], shown: Callable[[], bool]) -> None:
    """Let queued messages run, with no time passing on purpose: no timer gets a turn to help.

    A few rounds, since the worker, its message and the bound widgets each take one.
    """
    for _ in range(5):
        if shown():
            return
        await pilot.pause()
    assert shown(), "not shown once the queued messages ran"


async def open_calibration(pilot: Pilot[None], app: HeftDashboard) -> CalibrationScreen:
    await settle(pilot, app, lambda: len(app.state.channels) == 2)
    await pilot.press("c")
    await settle(pilot, app, lambda: isinstance(app.screen, CalibrationScreen))
    screen = app.screen
    assert isinstance(screen, CalibrationScreen)
    return screen


def make_app(
    reply: Callable[[Command], Reply] | None = None, *, commands_enabled: bool = True
) -> tuple[HeftDashboard, ScriptedSource]:
    source = ScriptedSource(
        session_events(), reply=reply, jobs=JOBS, commands_enabled=commands_enabled
    )
    return HeftDashboard(source), source


async def test_out_of_spec_capture_shows_fail_without_waiting_for_a_timer() -> None:
    app, source = make_app()
    async with app.run_test(size=SIZE) as pilot:
        await settle(pilot, app, lambda: len(app.state.measurements) == 7)
        banner = app.query_one(VerdictBanner)
        await settle(pilot, app, lambda: banner.has_class("pass"))
        source.push(out_of_spec_event())
        await until_idle(pilot, lambda: banner.has_class("fail"))
        assert app.state.last_measurement is not None
        assert app.state.last_measurement.seq == 99
        text = str(banner.render())
        assert "FAIL" in text and "ABOVE" in text


async def test_calibration_flow_sends_zero_span_verify() -> None:
    def reply(cmd: Command) -> Reply:
        data: dict[str, object] = {}
        if isinstance(cmd, VerifyCheckMass):
            data = {"result_g": 200.03, "residual_g": 0.03, "passed": True,
                    "next_due": "2026-06-12"}
        return Reply(ok=True, command=cmd.command, data=data)

    app, source = make_app(reply)
    async with app.run_test(size=SIZE) as pilot:
        screen = await open_calibration(pilot, app)
        await pilot.press("down", "enter")  # beam/1
        await settle(pilot, app, lambda: screen.step == "step-zero")
        await pilot.press("enter")
        await settle(pilot, app, lambda: screen.step == "step-span")
        await pilot.press(*"500", "tab", "tab", *"R-500-07", "enter")
        await settle(pilot, app, lambda: screen.step == "step-verify")
        await pilot.press(*"200g", "enter")
        await settle(pilot, app, lambda: screen.step == "step-result")
        assert source.sent == [
            CalibrateZero(command="calibrate_zero", channel="beam/1"),
            CalibrateSpan(command="calibrate_span", channel="beam/1", mass_g=500.0,
                          weight_class="M1", weight_id="R-500-07"),
            VerifyCheckMass(command="verify", channel="beam/1", mass_g=200.0),
        ]
        result = str(screen.query_one("#cal-result", Static).render())
        assert "2026-06-12" in result and "YES" in result
        await pilot.press("enter")  # Done
        await settle(pilot, app, lambda: not isinstance(app.screen, CalibrationScreen))


async def test_refused_span_stays_on_the_step_with_the_reason() -> None:
    def reply(cmd: Command) -> Reply:
        if isinstance(cmd, CalibrateSpan):
            return Reply(ok=False, command=cmd.command, message="beam/0 is not stable")
        return Reply(ok=True, command=cmd.command)

    app, source = make_app(reply)
    async with app.run_test(size=SIZE) as pilot:
        screen = await open_calibration(pilot, app)
        await pilot.press("enter", "enter")
        await settle(pilot, app, lambda: screen.step == "step-span")
        await pilot.press("enter")  # no mass typed: refused here, nothing sent
        await pilot.pause()
        assert len(source.sent) == 1
        assert "mass" in str(screen.query_one("#cal-message", Static).render())
        await pilot.press(*"500", "enter")
        await settle(pilot, app, lambda: len(source.sent) == 2 and not screen.busy)
        await pilot.pause()
        assert screen.step == "step-span"
        assert "not stable" in str(screen.query_one("#cal-message", Static).render())
        assert screen.query_one(ContentSwitcher).current == "step-span"


async def test_job_selection_sends_select_job() -> None:
    app, source = make_app()
    async with app.run_test(size=SIZE) as pilot:
        await settle(pilot, app, lambda: len(app.state.measurements) == 7)
        await pilot.press("j")
        await pilot.pause()
        await pilot.press("down", "enter")  # the picker starts on the current job, LK-2417
        await settle(pilot, app, lambda: bool(source.sent))
        assert source.sent == [SelectJob(command="select_job", job="LK-2418")]
        await settle(pilot, app, lambda: app.state.selected_job == "LK-2418")


async def test_typed_job_name_is_selected() -> None:
    app, source = make_app()
    async with app.run_test(size=SIZE) as pilot:
        await settle(pilot, app, lambda: len(app.state.measurements) == 7)
        await pilot.press("j")
        await pilot.pause()
        await pilot.press("tab", *"LK-2500", "enter")
        await settle(pilot, app, lambda: bool(source.sent))
        assert source.sent == [SelectJob(command="select_job", job="LK-2500")]


async def test_acknowledge_newest_alarm_from_live_and_selected_from_alarms_tab() -> None:
    app, source = make_app()
    async with app.run_test(size=SIZE) as pilot:
        await settle(pilot, app, lambda: len(app.state.unacknowledged()) == 2)
        newest = app.state.unacknowledged()[0].key
        await pilot.press("a")
        await settle(pilot, app, lambda: len(source.sent) == 1)
        assert source.sent[0] == AcknowledgeAlarm(command="ack_alarm", key=newest)
        await pilot.press("4")
        await pilot.pause()
        table = app.query_one(AlarmsTable)
        # History, newest first, starts with a cleared out-of-spec alarm; the cursor starts on
        # the newest line of an active, unacknowledged alarm instead.
        assert table.cursor_row > 0
        selected = table.selected_alarm_key()
        assert selected is not None and not app.state.alarms[selected].acknowledged
        await pilot.press("a")
        await settle(pilot, app, lambda: len(source.sent) == 2)
        assert source.sent[1] == AcknowledgeAlarm(command="ack_alarm", key=selected)
        table.move_cursor(row=0)  # the cleared alarm: nothing to acknowledge
        await pilot.pause()
        assert table.selected_alarm_key() not in app.state.alarms
        await pilot.press("a")
        await pilot.pause(0.2)
        assert len(source.sent) == 2
        assert newest == "device_offline:scan"


async def test_read_only_dashboard_sends_nothing() -> None:
    app, source = make_app(commands_enabled=False)
    async with app.run_test(size=SIZE) as pilot:
        await settle(pilot, app, lambda: len(app.state.unacknowledged()) == 2)
        banner = app.query_one(AlarmBanner)
        await settle(pilot, app, lambda: "ALARM" in str(banner.render()))
        assert "acknowledge" not in str(banner.render())  # `a` would do nothing here
        assert "read-only" in str(banner.render())
        await pilot.press("a", "t", "r", "c")
        await pilot.pause(0.2)
        assert source.sent == []
        assert not isinstance(app.screen, CalibrationScreen)
        assert "read-only" in app.sub_title
        hints = [n.message for n in app._notifications]
        assert hints and all(h == READ_ONLY_HINT for h in hints)


async def test_keeps_up_with_four_channels_at_80_per_second() -> None:
    app, source = make_app()
    channels = [f"beam/{i}" for i in range(4)]
    seconds = 10
    async with app.run_test(size=SIZE) as pilot:
        await settle(pilot, app, lambda: len(app.state.measurements) == 7)
        applied = app.state.events_applied
        sent = 0
        for tick in range(80 * seconds):  # pushed in 0.1 s bursts, as the service would
            t = 2000.0 + tick / 80
            source.push(*(LiveReading(station=STATION, channel=ch, t_mono_s=t,
                                      value_g=100.0 + tick, flags=Flag.STABLE)
                          for ch in channels))
            sent += len(channels)
            if tick % 8 == 7:
                await asyncio.sleep(0)
        await settle(pilot, app, lambda: app.state.events_applied - applied == sent)
        assert source.dropped == 0
        trace = app.state.channels["beam/3"]
        assert trace.last_value_g == 100.0 + 80 * seconds - 1
        cell = app.query_one("#ch-beam-3 .channel-value", Static)
        await settle(pilot, app, lambda: f"{100.0 + 80 * seconds - 1:.2f}" in str(cell.render()))
        assert app.ui_errors == 0


class _ServiceLoop:
    """A stand-in service on its own thread and loop: publishes live readings until stopped."""

    def __init__(self) -> None:
        import threading

        self.bus = EventBus()
        self.published = 0
        self.loop = asyncio.new_event_loop()
        self._stop = threading.Event()
        self.thread = threading.Thread(target=self.loop.run_until_complete, args=(self._run(),))

    async def _run(self) -> None:
        while not self._stop.is_set():
            self.published += 1
            self.bus.publish(LiveReading(station=STATION, channel="beam/0",
                                         t_mono_s=self.published / 80, value_g=1.0,
                                         flags=Flag.NONE))
            await asyncio.sleep(1 / 80)

    async def handle(self, cmd: Command) -> Reply:
        raise RuntimeError("service-side failure")

    def stop(self) -> None:
        self._stop.set()
        self.thread.join(5)
        self.loop.close()


async def test_a_crashing_dashboard_does_not_stop_the_service_thread() -> None:
    service = _ServiceLoop()
    service.thread.start()
    try:
        source = InProcessSource(service.bus, service.handle, service_loop=service.loop)
        app = HeftDashboard(source)

        def crash() -> None:
            raise RuntimeError("a bug in the dashboard")

        with pytest.raises(RuntimeError, match="a bug in the dashboard"):
            async with app.run_test(size=SIZE) as pilot:
                await settle(pilot, app, lambda: app.state.events_applied > 10)
                reply = await source.send(Rearm(command="rearm"))
                assert not reply.ok and "service-side failure" in reply.message
                app.call_later(crash)
                await pilot.pause(0.5)
        at_crash = service.published
        for _ in range(100):
            await asyncio.sleep(0.05)
            if service.published > at_crash + 10:
                break
        assert service.published > at_crash + 10, "the service stopped with the dashboard"
        assert service.thread.is_alive()
    finally:
        service.stop()


async def test_in_process_source_on_the_same_loop_with_backfill(tmp_path: Path) -> None:
    from heft.daemon.storage import Store

    bus = EventBus()
    store = Store(tmp_path / "bench.db")
    older = make_measurement(1, "4i", 409.6, 32.1)
    store.add_measurement(older)  # captured before the dashboard started
    handled: list[Command] = []

    async def handle(cmd: Command) -> Reply:
        handled.append(cmd)
        return Reply(ok=True, command=cmd.command)

    try:
        app = HeftDashboard(InProcessSource(bus, handle, store))
        async with app.run_test(size=SIZE) as pilot:
            await settle(pilot, app, lambda: len(app.state.measurements) == 1)
            bus.publish(MeasurementCaptured(measurement=make_measurement(2, "5i", 416.2, 31.8)))
            await settle(pilot, app, lambda: len(app.state.measurements) == 2)
            assert [m.seq for m in app.state.measurements] == [1, 2]
            await pilot.press("r")
            await settle(pilot, app, lambda: bool(handled))
            assert handled == [Rearm(command="rearm")]
    finally:
        store.close()


async def test_bell_rings_on_fail_and_new_alarm_only_when_enabled() -> None:
    source = ScriptedSource(session_events(clubs=3))  # 4i-6i pass; two alarms raised at start
    app = HeftDashboard(source, bell=True)
    rings: list[str] = []
    app.bell = lambda: rings.append("ring")  # type: ignore[method-assign]
    async with app.run_test(size=SIZE) as pilot:
        await settle(pilot, app, lambda: len(app.state.measurements) == 3)
        await pilot.pause(0.2)
        assert rings == ["ring"]  # the two alarms arrived together: one ring, no ring for PASS
        source.push(out_of_spec_event())
        await settle(pilot, app, lambda: len(rings) == 2)
        await pilot.press("b")  # bell off
        source.push(out_of_spec_event(seq=100))
        await settle(pilot, app, lambda: app.state.last_measurement is not None
                     and app.state.last_measurement.seq == 100)
        await pilot.pause(0.3)
        assert len(rings) == 2


async def test_unreachable_broker_is_shown_with_the_retry() -> None:
    # Port 1 on loopback: nothing listens there, the connection is refused at once.
    app = HeftDashboard(MqttSource("mqtt://127.0.0.1:1"))
    async with app.run_test(size=SIZE) as pilot:
        await settle(pilot, app, lambda: "cannot reach 127.0.0.1:1" in app.sub_title)
        assert "retrying" in app.sub_title
        assert "waiting for a station" in app.sub_title
        banner = app.query_one(VerdictBanner)  # said where it cannot be missed, too
        await settle(pilot, app, lambda: "cannot reach 127.0.0.1:1" in str(banner.render()))


async def test_80x24_keeps_the_essentials_on_screen() -> None:
    app, _ = make_app()
    async with app.run_test(size=(80, 24)) as pilot:
        await settle(pilot, app, lambda: len(app.state.measurements) == 7)
        await settle(pilot, app, lambda: len(app.query("ChannelRow")) == 2)
        await pilot.pause(0.3)
        assert app.has_class("short") and app.has_class("narrow")
        screen = app.screen.region
        for selector in ("#verdict", "#alarm-banner", "#sw-letter", "#sw-digits", "#capture",
                         "#measurements", "ChannelRow"):
            for widget in app.query(selector):
                region = widget.region
                assert region.height > 0 and screen.contains_region(region), selector
        # Every key the footer offers fits on its one line, Help and Quit included.
        keys = [k for k in app.query("FooterKey") if k.region.width > 0]
        assert {k.key for k in keys} >= {"question_mark", "q", "a", "c"}  # type: ignore[attr-defined]
        assert all(screen.contains_region(k.region) for k in keys)
        headers = [str(c.label) for c in app.query_one(MeasurementsTable).columns.values()]
        assert "club id" in headers and "verdict" in headers
        await pilot.press("2")
        plot = app.query_one("#plot-sw")
        # Room for the band, the ticks and the points (it was 3 rows before the layout fit).
        await settle(pilot, app, lambda: plot.region.height >= 12)
        assert not app.query_one("#plot-weight").display


def test_swing_weight_letter_is_drawn_apart_from_the_digits() -> None:
    assert split_label("D2.0") == ("D", "2.0")
    assert split_label("G0+") == ("G", "0+")
    assert split_label("C9.95") == ("C", "9.95")
    assert split_label("--.-") == ("", "--.-")
