"""The heft dashboard: a Textual app fed by an EventSource.

Events are folded into :class:`tui.state.DashboardState` as they arrive (a worker awaiting the
source); the screen is redrawn from that state on a timer (10 Hz by default), and only the parts
whose revision moved. Commands go out through the source in workers, so nothing here blocks the
event loop.
"""

from __future__ import annotations

import logging
import time
from pathlib import Path
from typing import ClassVar

from textual import events, work
from textual.app import App, ComposeResult
from textual.binding import Binding, BindingType
from textual.containers import Horizontal, Vertical
from textual.widgets import Footer, Header, TabbedContent, TabPane

from heft.daemon.command_api import AcknowledgeAlarm, Command, Rearm, SelectJob, Tare
from heft.daemon.events import CaptureState
from heft.daemon.measurement import Verdict
from heft.tui.calibration import CalibrationScreen
from heft.tui.channels import ChannelsPanel
from heft.tui.format import READ_ONLY_HINT
from heft.tui.help import HelpScreen
from heft.tui.pickers import JobPicker, StationPicker
from heft.tui.readout import AlarmBanner, CaptureLine, Readout, ToleranceGauge, VerdictBanner
from heft.tui.set_view import SetView
from heft.tui.source import EventSource
from heft.tui.state import DashboardState
from heft.tui.tables import AlarmsTable, DevicesTable, MeasurementsTable

log = logging.getLogger(__name__)

REFRESH_HZ = 10.0
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

    def __init__(
        self,
        source: EventSource,
        *,
        station: str | None = None,
        bell: bool = False,
        refresh_hz: float = REFRESH_HZ,
    ) -> None:
        super().__init__()
        self.source = source
        self.state = DashboardState(station)
        self.bell_enabled = bell
        self.refresh_hz = refresh_hz
        self.ui_errors = 0
        self.refreshes = 0
        self._drawn: dict[str, int] = {}
        self._last_verdict_id: str | None = None
        self._alarm_keys_rung: set[str] = set()

    # -- layout ---------------------------------------------------------------------------

    def compose(self) -> ComposeResult:
        yield Header(show_clock=False, icon="≡")
        yield VerdictBanner("", id="verdict")
        yield AlarmBanner("", id="alarm-banner")
        with TabbedContent(initial="live", id="tabs"):
            with TabPane("1 Live", id="live"):
                with Horizontal(id="live-top"):
                    yield Readout(id="readout")
                    with Vertical(id="live-side"):
                        yield CaptureLine("", id="capture")
                        yield ToleranceGauge("swingweight", id="gauge-sw")
                        yield ToleranceGauge("total_weight", id="gauge-weight")
                        yield ToleranceGauge("balance_point", id="gauge-bp")
                        yield ChannelsPanel(id="channels")
                yield MeasurementsTable(id="measurements")
            with TabPane("2 Set", id="set"):
                yield SetView(id="set-view")
            with TabPane("3 Devices", id="devices"):
                yield DevicesTable(id="devices-table")
            with TabPane("4 Alarms", id="alarms"):
                yield AlarmsTable(id="alarms-table")
        yield Footer()

    def on_resize(self, event: events.Resize) -> None:
        self._fit(event.size.width, event.size.height)

    def _fit(self, width: int, height: int) -> None:
        """Below SHORT_ROWS / NARROW_COLS the stylesheet drops the less important parts."""
        self.set_class(height < SHORT_ROWS, "short")
        self.set_class(width < NARROW_COLS, "narrow")
        self.title = "heft" if width < NARROW_COLS else self.TITLE
        self.query_one(MeasurementsTable).set_compact(width < NARROW_COLS)

    async def on_mount(self) -> None:
        self._fit(self.size.width, self.size.height)
        self._set_subtitle()
        await self.source.start()
        self._consume()
        self._backfill()
        self.set_interval(1.0 / self.refresh_hz, self.refresh_views)
        self.refresh_views()

    async def on_unmount(self) -> None:
        await self.source.stop()

    def _set_subtitle(self) -> None:
        ro = "" if self.source.commands_enabled else "  (read-only)"
        station = self.state.station or "waiting for a station"
        link = self.source.connection_text(time.monotonic()) or self.source.label
        self.sub_title = f"{station} · {link}{ro}"

    # -- events in ------------------------------------------------------------------------

    @work(exclusive=True, group="events")
    async def _consume(self) -> None:
        while True:
            batch = await self.source.next_batch()
            for event in batch:
                try:
                    self.state.apply(event)
                except Exception:  # one bad event must not end the dashboard
                    self.ui_errors += 1
                    log.exception("event not shown: %r", event)

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

    # -- redraw ---------------------------------------------------------------------------

    def _moved(self, area: str, revision: int) -> bool:
        if self._drawn.get(area) == revision:
            return False
        self._drawn[area] = revision
        return True

    def refresh_views(self) -> None:
        """Redraw whatever changed since the last call (the timer calls this at refresh_hz)."""
        self.refreshes += 1
        try:
            self._refresh_views()
        except Exception:  # a drawing bug shows up in the log, the dashboard keeps going
            self.ui_errors += 1
            log.exception("refresh failed")

    def _refresh_views(self) -> None:
        s, rev = self.state, self.state.rev
        self._set_subtitle()  # cheap; Textual redraws the header only when the text changed
        if self._moved("measurements", rev.measurements):
            last = s.last_measurement
            self.query_one(VerdictBanner).show(last)
            self._drawn.pop("waiting", None)
            self.query_one(Readout).show(last)
            for gauge in self.query(ToleranceGauge):
                gauge.show(last)
            self.query_one(MeasurementsTable).show(s.measurements)
            self._drawn.pop("set", None)
            self._ring_for_fail()
        if s.last_measurement is None:  # the banner says why nothing is shown yet
            link = self.source.connection_text(time.monotonic())
            if link and self._moved("waiting", hash(link)):
                self.query_one(VerdictBanner).show(None, waiting=link)
        settling = s.capture_state is CaptureState.SETTLING
        if self._moved("capture", hash((rev.capture, rev.live if settling else 0))):
            self.query_one(CaptureLine).show(s.capture, s.load_g())
        if self._moved("live", rev.live):
            if self.query_one(ChannelsPanel).show(s.channels):
                self._drawn.pop("live", None)
            if isinstance(self.screen, CalibrationScreen):
                self.screen.refresh_live()
        if self._moved("alarms", rev.alarms):
            self.query_one(AlarmBanner).show(
                s.unacknowledged(), can_acknowledge=self.source.commands_enabled
            )
            self.query_one(AlarmsTable).show(s.alarm_history, s.alarms)
            self._ring_for_alarms()
        tabs = self.query_one(TabbedContent)
        # Last readings in grams come from the live traces: on its tab, once a second.
        tick = int(time.monotonic()) if tabs.active == "devices" else 0
        if self._moved("devices", hash((rev.devices, tick))):
            self.query_one(DevicesTable).show(s.devices.values(), s.device_reading_g)
        if tabs.active == "set" and self._moved("set", rev.measurements):
            job = s.current_job()
            self.query_one(SetView).show(job, s.job_measurements(job))

    def _ring_for_fail(self) -> None:
        last = self.state.last_measurement
        if last is None or str(last.id) == self._last_verdict_id:
            return
        self._last_verdict_id = str(last.id)
        if last.verdict is Verdict.FAIL and self.bell_enabled:
            self.bell()

    def _ring_for_alarms(self) -> None:
        keys = {a.key for a in self.state.unacknowledged()}
        new = keys - self._alarm_keys_rung
        self._alarm_keys_rung = keys
        if new and self.bell_enabled:
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
        return not (action == "station" and len(self.state.stations) < 2)

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
        self.refresh_views()
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
            self._drawn.pop("set", None)

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

        def live_value(channel: str) -> float | None:
            trace = self.state.channels.get(channel)
            return None if trace is None else trace.last_value_g

        def closed(_: None) -> None:
            self.source.calibrating(False)

        note = self.source.calibrating(True)
        screen = CalibrationScreen(channels, self.source.send, live_value, note=note)
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
                self._drawn.clear()
                self.refresh_views()

        self.push_screen(StationPicker(list(self.state.stations), self.state.station), chosen)

    def action_toggle_bell(self) -> None:
        self.bell_enabled = not self.bell_enabled
        self.notify(f"bell {'on' if self.bell_enabled else 'off'}")

    def action_help(self) -> None:
        self.push_screen(HelpScreen())
