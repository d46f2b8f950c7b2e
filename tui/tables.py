"""Tables: recent measurements, devices, alarm history."""

from __future__ import annotations

from collections.abc import Iterable, Mapping

from rich.text import Text
from textual.coordinate import Coordinate
from textual.reactive import var
from textual.widgets import DataTable

from heft.daemon.events import Alarm, DeviceStatus
from heft.daemon.measurement import Measurement, Verdict
from heft.tui.format import ALARM_KIND_WORDS, VERDICT_WORDS, alarm_state_word
from heft.tui.state import AlarmLog

VERDICT_STYLE: dict[Verdict, str] = {
    Verdict.PASS: "bold green",
    Verdict.NEAR_LIMIT: "bold yellow",
    Verdict.FAIL: "bold white on red",
    Verdict.NO_SPEC: "dim",
}


def _num(value: float | None, decimals: int) -> str:
    return "-" if value is None else f"{value:.{decimals}f}"


class _Table(DataTable[str | Text]):
    """A read-mostly table rebuilt when its reactive data changes, keeping the cursor row."""

    COLUMNS: tuple[str, ...] = ()

    def __init__(self, *, id: str | None = None) -> None:
        super().__init__(id=id, cursor_type="row", zebra_stripes=True)

    def on_mount(self) -> None:
        if not self.columns:
            self.add_columns(*self.shown_columns())

    def shown_columns(self) -> tuple[str, ...]:
        return self.COLUMNS

    def _rebuild(self, rows: Iterable[tuple[str, tuple[str | Text, ...]]]) -> None:
        keep = self.cursor_row
        self.clear()
        for key, cells in rows:
            self.add_row(*cells, key=key)
        if self.row_count:
            self.move_cursor(row=min(keep, self.row_count - 1), animate=False)


class MeasurementsTable(_Table):
    # The verdict comes early so that a narrow terminal still shows it.
    COLUMNS = ("#", "time UTC", "club", "verdict", "swing wt", "± pt", "total g", "BP in",
               "moment g·in", "club id")
    # On a narrow terminal: what a bench operator checks, club id included.
    COMPACT_COLUMNS = ("#", "club", "verdict", "swing wt", "total g", "BP in", "club id")
    LIMIT = 100  # newest rows shown

    measurements: var[tuple[Measurement, ...]] = var((), init=False)
    compact: var[bool] = var(False, init=False)
    """All columns, or the narrow set (the app sets it from the terminal's width)."""

    def shown_columns(self) -> tuple[str, ...]:
        return self.COMPACT_COLUMNS if self.compact else self.COLUMNS

    def watch_compact(self) -> None:
        if self.columns:  # else on_mount adds the right ones
            self.clear(columns=True)
            self.add_columns(*self.shown_columns())
            self.watch_measurements(self.measurements)

    def watch_measurements(self, measurements: tuple[Measurement, ...]) -> None:
        newest_first = measurements[::-1][: self.LIMIT]
        wanted = [self.COLUMNS.index(c) for c in self.shown_columns()]
        self._rebuild(
            (str(m.id), tuple(_measurement_cells(m)[i] for i in wanted)) for m in newest_first
        )


def _measurement_cells(m: Measurement) -> tuple[str | Text, ...]:
    """One row in MeasurementsTable.COLUMNS order."""
    return (
        str(m.seq),
        m.time_utc.strftime("%H:%M:%S"),
        m.club or "-",
        Text(VERDICT_WORDS[m.verdict], style=VERDICT_STYLE[m.verdict]),
        m.swingweight,
        _num(m.swingweight_points_u, 2),
        f"{m.total_weight_g:.1f}",
        f"{m.balance_point_in:.2f}",
        f"{m.moment_g_in:.0f}",
        m.club_id or "-",
    )


def last_reading_text(raw: float | None, grams: float | None) -> str:
    """A device's last reading with its unit: grams when known, else the raw value, labelled."""
    if grams is not None:
        return f"{grams:.2f} g"
    if raw is None:
        return "-"
    return f"{raw:.0f} counts" if float(raw).is_integer() else f"{raw:g} (raw)"


class DevicesTable(_Table):
    COLUMNS = ("device", "state", "port", "rate /s", "frame errors", "last reading",
               "model", "firmware")
    _READING = COLUMNS.index("last reading")

    devices: var[tuple[DeviceStatus, ...]] = var((), init=False)
    readings_g: var[Mapping[str, float | None]] = var(dict, init=False)
    """Each device's latest live value in grams, when it has a load channel."""

    def watch_devices(self, devices: tuple[DeviceStatus, ...]) -> None:
        grams = self.readings_g
        self._rebuild(
            (
                d.device,
                (
                    d.device,
                    Text("connected", style="green") if d.connected
                    else Text("NOT CONNECTED", style="bold white on red"),
                    d.port,
                    _num(d.sample_rate_hz, 1),
                    str(d.frame_errors),
                    last_reading_text(d.last_value, grams.get(d.device)),
                    d.model or "-",
                    d.firmware or "-",
                ),
            )
            for d in sorted(devices, key=lambda d: d.device)
        )

    def watch_readings_g(self) -> None:
        if self.is_on_screen:  # on another tab: brought up to date when shown (on_show)
            self._show_readings()

    def on_show(self) -> None:
        self._show_readings()

    def _show_readings(self) -> None:
        """Live values move many times a second: only the cells whose text changed are redrawn."""
        grams = self.readings_g
        column = self.ordered_columns[self._READING].key
        for d in self.devices:
            text = last_reading_text(d.last_value, grams.get(d.device))
            if d.device in self.rows and self.get_cell(d.device, column) != text:
                self.update_cell(d.device, column, text)


class AlarmsTable(_Table):
    """Alarm history, newest first; the row key is the alarm key so `a` can acknowledge it."""

    COLUMNS = ("time UTC", "state", "kind", "source", "message")

    alarm_log: var[AlarmLog] = var(AlarmLog, init=False)

    def watch_alarm_log(self, log: AlarmLog) -> None:
        active = log.active
        rows: list[tuple[str, tuple[str | Text, ...]]] = []
        seen: set[str] = set()
        for n, alarm in enumerate(reversed(log.history)):
            # Show each alarm's current state on its newest line; older lines are history.
            current = active.get(alarm.key) if alarm.key not in seen else None
            seen.add(alarm.key)
            shown = current or alarm
            word = alarm_state_word(shown) if current or not alarm.active else "raised"
            style = "bold white on red" if word == "ACTIVE" else (
                "yellow" if word.startswith("ACTIVE") else "dim")
            rows.append(
                (
                    f"{n}|{alarm.key}",
                    (
                        alarm.time_utc.strftime("%Y-%m-%d %H:%M:%S"),
                        Text(word, style=style),
                        ALARM_KIND_WORDS.get(alarm.kind, alarm.kind.value),
                        alarm.source,
                        alarm.message,
                    ),
                )
            )
        self._rebuild(rows)

    def select_newest_active(self, active: Mapping[str, Alarm]) -> None:
        """Put the cursor on the newest line of an active alarm (unacknowledged first)."""
        keys = [self.coordinate_to_cell_key(Coordinate(r, 0)).row_key.value or ""
                for r in range(self.row_count)]
        alarms = [k.split("|", 1)[1] for k in keys]
        for unacknowledged_only in (True, False):
            for row, key in enumerate(alarms):
                if key in active and not (unacknowledged_only and active[key].acknowledged):
                    self.move_cursor(row=row, animate=False)
                    return

    def selected_alarm_key(self) -> str | None:
        if not self.row_count:
            return None
        row_key = self.coordinate_to_cell_key(Coordinate(self.cursor_row, 0)).row_key.value
        return None if row_key is None else row_key.split("|", 1)[1]
