"""The heft dashboard: a Textual app fed by an EventSource.

A worker awaits the source and folds each batch of events into
:class:`heft.tui.state.DashboardState`, then posts :class:`heft.tui.messages.StateChanged` naming
the areas the batch touched. Its handler copies fresh snapshots of those areas into the app's
reactive attributes; widgets are bound to them (``data_bind``) and redraw in their watchers, only
when a value really changed. Nothing polls: no change, no redraw. Commands go out through the
source in workers, so nothing here blocks the event loop.
"""

from __future__ import annotations

import logging
import time
from collections.abc import Mapping
from pathlib import Path
from typing import ClassVar

from textual import events, on, work
from textual.app import App, ComposeResult
from textual.binding import Binding, BindingType
from textual.containers import Horizontal, Vertical
from textual.reactive import var
from textual.widgets import Footer, Header, TabbedContent, TabPane

from heft.daemon.command_api import AcknowledgeAlarm, Command, Rearm, SelectJob, Tare
from heft.daemon.events import Alarm, CaptureStateChanged, DeviceStatus
from heft.daemon.measurement import Measurement, Verdict
from heft.tui.calibration import CalibrationScreen
from heft.tui.channels import ChannelsPanel
from heft.tui.format import READ_ONLY_HINT
from heft.tui.help import HelpScreen
from heft.tui.messages import StateChanged
from heft.tui.pickers import JobPicker, StationPicker
from heft.tui.readout import AlarmBanner, CaptureLine, Readout, ToleranceGauge, VerdictBanner
from heft.tui.set_view import SetView
from heft.tui.source import EventSource
from heft.tui.state import (
    ALL_AREAS,
    AlarmLog,
    Area,
    ChannelView,
    DashboardState,
    SetData,
)
from heft.tui.tables import AlarmsTable, DevicesTable, MeasurementsTable

log = logging.getLogger(__name__)

LINK_CLOCK_S = 1.0  # the reconnect countdown ("retrying in N s") counts whole seconds
SHORT_ROWS = 32  # fewer rows than this: one-line verdict, fewer gauges, one plot on Set
NARROW_COLS = 100  # fewer columns: narrower readout, fewer table columns
BACKFILL = 100
TABS = ("live", "set", "devices", "alarms")
COMMAND_KEYS = frozenset({"a", "j", "c", "r", "t"})
COMMAND_ACTIONS = frozenset({"acknowledge", "select_job", "calibrate", "rearm", "tare"})
DASHBOARD_ACTIONS = COMMAND_ACTIONS | {"tab", "station", "toggle_bell", "help"}


class HeftDashboard(App[None]):
    """Live readout, set plots, devices, alarms, calibration and help for one station."""

    CSS_PATH = Path(__file__).with_name("dashboard.tcss")
    TITLE = "heft dashboard"
    ENABLE_COMMAND_PALETTE = False

    BINDINGS: ClassVar[list[BindingType]] = [
        # The tab keys are written on the tabs themselves ("1 Live" ...), not in the footer.
        Binding("1", "tab('live')", "Live", show=False),
        Binding("2", "tab('set')", "Set", show=False),
        Binding("3", "tab('devices')", "Devices", show=False),
        Binding("4", "tab('alarms')", "Alarms", show=False),
        Binding("a", "acknowledge", "Ack"),
        Binding("j", "select_job", "Job"),
        Binding("c", "calibrate", "Calibrate"),
        Binding("r", "rearm", "Re-arm"),
        Binding("t", "tare", "Tare"),
        Binding("s", "station", "Station"),
        Binding("b", "toggle_bell", "Bell"),
        Binding("question_mark", "help", "Help", key_display="?"),
        Binding("q", "quit", "Quit"),
    ]

    # What the screens show, one snapshot per area; the widgets are bound to these in compose.
    last_measurement: var[Measurement | None] = var(None, init=False)
    measurements: var[tuple[Measurement, ...]] = var((), init=False)
    set_data: var[SetData] = var(SetData, init=False)
    capture: var[CaptureStateChanged | None] = var(None, init=False)
    settling_load_g: var[float | None] = var(None, init=False)
    channels: var[tuple[ChannelView, ...]] = var((), init=False)
    readings_g: var[Mapping[str, float | None]] = var(dict, init=False)
    device_readings_g: var[Mapping[str, float | None]] = var(dict, init=False)
    devices: var[tuple[DeviceStatus, ...]] = var((), init=False)
    unacknowledged: var[tuple[Alarm, ...]] = var((), init=False)
    alarm_log: var[AlarmLog] = var(AlarmLog, init=False)
    link: var[str] = var("", init=False)
    """The link to the service in words ('' in-process): in the header, and in the banner until
    the first club."""
    station: var[str | None] = var(None, init=False)
    several_stations: var[bool] = var(False, init=False, bindings=True)
    """More than one station has published: the footer offers the station key."""

    def __init__(
        self,
        source: EventSource,
        *,
        station: str | None = None,
        bell: bool = False,
    ) -> None:
        super().__init__()
        self.source = source
        self.state = DashboardState(station)
        self.set_reactive(HeftDashboard.station, station)
        self.bell_enabled = bell
        self.ui_errors = 0

    # -- layout ---------------------------------------------------------------------------

    def compose(self) -> ComposeResult:
        app = HeftDashboard
        yield Header(show_clock=False, icon="≡")
        yield VerdictBanner("", id="verdict").data_bind(
            measurement=app.last_measurement, waiting=app.link
        )
        yield AlarmBanner(can_acknowledge=self.source.commands_enabled, id="alarm-banner"
                          ).data_bind(alarms=app.unacknowledged)
        with TabbedContent(initial="live", id="tabs"):
            with TabPane("1 Live", id="live"):
                with Horizontal(id="live-top"):
                    yield Readout(id="readout").data_bind(measurement=app.last_measurement)
                    with Vertical(id="live-side"):
                        yield CaptureLine("", id="capture").data_bind(
                            app.capture, load_g=app.settling_load_g
                        )
                        for check, gauge_id in (("swingweight", "gauge-sw"),
                                                ("total_weight", "gauge-weight"),
                                                ("balance_point", "gauge-bp")):
                            yield ToleranceGauge(check, id=gauge_id).data_bind(
                                measurement=app.last_measurement
                            )
                        yield ChannelsPanel(id="channels").data_bind(app.channels)
                yield MeasurementsTable(id="measurements").data_bind(app.measurements)
            with TabPane("2 Set", id="set"):
                yield SetView(id="set-view").data_bind(data=app.set_data)
            with TabPane("3 Devices", id="devices"):
                yield DevicesTable(id="devices-table").data_bind(
                    app.devices, readings_g=app.device_readings_g
                )
            with TabPane("4 Alarms", id="alarms"):
                yield AlarmsTable(id="alarms-table").data_bind(app.alarm_log)
        yield Footer()

    def on_resize(self, event: events.Resize) -> None:
        self._fit(event.size.width, event.size.height)

    def _fit(self, width: int, height: int) -> None:
        """Below SHORT_ROWS / NARROW_COLS the stylesheet drops the less important parts."""
        self.set_class(height < SHORT_ROWS, "short")
        self.set_class(width < NARROW_COLS, "narrow")
        self.title = "heft" if width < NARROW_COLS else self.TITLE
        self.query_one(MeasurementsTable).compact = width < NARROW_COLS

    async def on_mount(self) -> None:
        self._fit(self.size.width, self.size.height)
        self._set_subtitle()
        await self.source.start()
        self._consume()
        self._backfill()
        if self.source.connection_text(time.monotonic()):
            # A link that can be lost: its text counts down to the next reconnect attempt,
            # so it is a clock, read once a second (the reactive redraws only what changed).
            self._tick_link()
            self.set_interval(LINK_CLOCK_S, self._tick_link)

    async def on_unmount(self) -> None:
        await self.source.stop()

    def _tick_link(self) -> None:
        self.link = self.source.connection_text(time.monotonic())

    def watch_link(self) -> None:
        self._set_subtitle()

    def watch_station(self) -> None:
        self._set_subtitle()

    def _set_subtitle(self) -> None:
        ro = "" if self.source.commands_enabled else "  (read-only)"
        station = self.station or "waiting for a station"
        self.sub_title = f"{station} · {self.link or self.source.label}{ro}"

    # -- events in ------------------------------------------------------------------------

    @work(exclusive=True, group="events")
    async def _consume(self) -> None:
        while True:
            batch = await self.source.next_batch()
            changed: set[Area] = set()
            for event in batch:
                try:
                    changed |= self.state.apply(event)
                except Exception:  # one bad event must not end the dashboard
                    self.ui_errors += 1
                    log.exception("event not shown: %r", event)
            if changed:
                self.post_message(StateChanged(changed))

    @work(exclusive=True, group="backfill")
    async def _backfill(self) -> None:
        try:
            history = await self.source.backfill(BACKFILL)
        except Exception as err:
            self.notify(f"recent measurements unavailable: {err}", severity="warning")
            return
        for m in history:
            if self.state.station is None or m.station == self.state.station:
                self.state.add_measurement(m)
        self.state.sort_measurements()
        self.post_message(StateChanged({Area.MEASUREMENTS}))

    # -- state out, to the reactives ------------------------------------------------------

    @on(StateChanged)
    def _show(self, message: StateChanged) -> None:
        try:
            self._publish(message.areas)
        except Exception:  # a drawing bug shows up in the log, the dashboard keeps going
            self.ui_errors += 1
            log.exception("redraw failed")

    def _publish(self, areas: frozenset[Area]) -> None:
        """Copy the state of ``areas`` into the reactives; unchanged values redraw nothing."""
        s = self.state
        if Area.STATIONS in areas:
            self.station = s.station
            self.several_stations = len(s.stations) > 1
        if Area.MEASUREMENTS in areas:
            self.measurements = tuple(s.measurements)
            self.last_measurement = s.last_measurement
        if areas & {Area.MEASUREMENTS, Area.JOB}:
            self.set_data = s.set_data()
        if Area.CAPTURE in areas:
            self.capture = s.capture
        if areas & {Area.CAPTURE, Area.LIVE}:
            self.settling_load_g = s.settling_load_g()
        if Area.LIVE in areas:
            self.channels = s.channel_views()
            self.readings_g = {c: t.last_value_g for c, t in s.channels.items()}
        if areas & {Area.DEVICES, Area.LIVE}:
            self.devices = tuple(s.devices.values())
            self.device_readings_g = s.device_readings_g()
        if Area.ALARMS in areas:
            self.unacknowledged = tuple(s.unacknowledged())
            self.alarm_log = s.alarm_log()

    def watch_readings_g(self, readings_g: Mapping[str, float | None]) -> None:
        for screen in self.screen_stack:
            if isinstance(screen, CalibrationScreen):
                screen.readings_g = readings_g

    @on(VerdictBanner.Changed)
    def _ring_for_fail(self, message: VerdictBanner.Changed) -> None:
        if message.measurement.verdict is Verdict.FAIL and self.bell_enabled:
            self.bell()

    @on(AlarmBanner.Raised)
    def _ring_for_alarms(self, message: AlarmBanner.Raised) -> None:
        if self.bell_enabled:
            self.bell()

    # -- actions --------------------------------------------------------------------------

    def check_action(self, action: str, parameters: tuple[object, ...]) -> bool | None:
        """Command keys are shown dimmed (and do nothing) on a read-only dashboard.

        While a calibration, picker or help screen is open, only quitting stays bound here.
        """
        if len(self.screen_stack) > 1 and action in DASHBOARD_ACTIONS:
            return False
        if action in COMMAND_ACTIONS and not self.source.commands_enabled:
            return None
        # The station key is hidden until a second station publishes (room in the footer).
        return not (action == "station" and not self.several_stations)

    def on_key(self, event: events.Key) -> None:
        """A command key on a read-only dashboard says why nothing happens."""
        if (
            event.key in COMMAND_KEYS
            and not self.source.commands_enabled
            and len(self.screen_stack) == 1
        ):
            self.notify(READ_ONLY_HINT, severity="warning")

    def action_tab(self, tab: str) -> None:
        self.query_one(TabbedContent).active = tab
        focus = {"live": MeasurementsTable, "devices": DevicesTable, "alarms": AlarmsTable}
        if tab in focus:
            self.query_one(focus[tab]).focus()
        if tab == "alarms":  # `a` then acknowledges what is still active
            self.query_one(AlarmsTable).select_newest_active(self.state.alarms)

    @work(group="commands")
    async def send_command(self, cmd: Command) -> None:
        """Send one command and tell the operator what the service said."""
        reply = await self.source.send(cmd)
        text = reply.message or ("done" if reply.ok else "refused")
        self.notify(f"{cmd.command}: {text}", severity="information" if reply.ok else "error")
        if reply.ok and isinstance(cmd, SelectJob):
            self.state.selected_job = cmd.job
            self.post_message(StateChanged({Area.JOB}))

    def action_acknowledge(self) -> None:
        key: str | None = None
        if self.query_one(TabbedContent).active == "alarms":
            key = self.query_one(AlarmsTable).selected_alarm_key()
            if key is not None and key not in self.state.alarms:
                self.notify("that alarm is no longer active", severity="warning")
                return
        else:
            pending = self.state.unacknowledged()
            key = pending[0].key if pending else None
        if key is None:
            self.notify("no active alarm to acknowledge")
            return
        self.send_command(AcknowledgeAlarm(command="ack_alarm", key=key))

    def action_select_job(self) -> None:
        names = list(dict.fromkeys(self.source.known_jobs() + self.state.jobs()))

        def chosen(job: str | None) -> None:
            if job:
                self.send_command(SelectJob(command="select_job", job=job))

        self.push_screen(JobPicker(names, self.state.current_job()), chosen)

    def action_calibrate(self) -> None:
        channels = list(self.state.channels)
        if not channels:
            self.notify("no channels have reported yet", severity="warning")
            return

        def closed(_: None) -> None:
            self.source.calibrating(False)

        note = self.source.calibrating(True)
        screen = CalibrationScreen(channels, self.source.send, self.readings_g, note=note)
        self.push_screen(screen, closed)

    def action_rearm(self) -> None:
        self.send_command(Rearm(command="rearm"))

    def action_tare(self) -> None:
        self.send_command(Tare(command="tare"))

    def action_station(self) -> None:
        def chosen(station: str | None) -> None:
            if station and station != self.state.station:
                self.state.switch_station(station)
                self.source.select_station(station)
                self.post_message(StateChanged(ALL_AREAS))

        self.push_screen(StationPicker(list(self.state.stations), self.state.station), chosen)

    def action_toggle_bell(self) -> None:
        self.bell_enabled = not self.bell_enabled
        self.notify(f"bell {'on' if self.bell_enabled else 'off'}")

    def action_help(self) -> None:
        self.push_screen(HelpScreen())
