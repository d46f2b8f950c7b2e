"""What the dashboard knows, folded from events: a plain object, no widgets, no I/O.

The app folds each batch of events here (cheap dictionary updates); :meth:`DashboardState.apply`
says which :class:`Area` an event changed, so the app hands fresh values to the widgets of those
areas only, once per batch: 320 readings a second arrive in a few batches, not 320 redraws.
The ``*View`` classes are immutable snapshots of an area, the values the widgets' reactive
attributes hold (a reactive fires only when a new snapshot differs from the one it holds).
"""

from __future__ import annotations

import enum
import re
from collections import deque
from collections.abc import Iterable, Mapping
from dataclasses import dataclass, field

from heft.daemon.events import (
    Alarm,
    AlarmChanged,
    CaptureState,
    CaptureStateChanged,
    DeviceStatus,
    Event,
    LiveReading,
    MeasurementCaptured,
    station_of,
)
from heft.daemon.measurement import CheckResult, Measurement
from heft.drivers.reading import Flag

TRACE_LENGTH = 240  # samples kept per channel for the sparkline (3 s at 80 samples/s)
MEASUREMENTS_KEPT = 500
ALARM_HISTORY_KEPT = 500


@dataclass
class ChannelTrace:
    """Recent values of one channel."""

    channel: str
    values_g: deque[float] = field(default_factory=lambda: deque(maxlen=TRACE_LENGTH))
    last_value_g: float | None = None
    last_t_mono_s: float | None = None
    flags: Flag = Flag.NONE
    samples: int = 0


@dataclass(frozen=True, slots=True)
class ChannelView:
    """One channel as the screen shows it: latest value, flags and the recent trace."""

    channel: str
    last_value_g: float | None
    flags: Flag
    values_g: tuple[float, ...]


@dataclass(frozen=True, slots=True)
class AlarmLog:
    """The alarm history (oldest first) and the alarms active now, by key."""

    history: tuple[Alarm, ...] = ()
    active: Mapping[str, Alarm] = field(default_factory=dict)


@dataclass(frozen=True, slots=True)
class SetData:
    """The job the set view shows and its measurements."""

    job: str | None = None
    measurements: tuple[Measurement, ...] = ()


class Area(enum.Enum):
    """A part of the state that one kind of event changes; the app refreshes per area."""

    LIVE = "live"
    CAPTURE = "capture"
    MEASUREMENTS = "measurements"
    ALARMS = "alarms"
    DEVICES = "devices"
    STATIONS = "stations"
    JOB = "job"


ALL_AREAS = frozenset(Area)


class DashboardState:
    """Everything the screens show, for one station at a time.

    Args:
        station: show only this station's events; ``None`` adopts the first station heard from.
    """

    def __init__(self, station: str | None = None) -> None:
        self.station = station
        self.stations: list[str] = []
        self.capture: CaptureStateChanged | None = None
        self.channels: dict[str, ChannelTrace] = {}
        self.measurements: deque[Measurement] = deque(maxlen=MEASUREMENTS_KEPT)
        self._measurement_ids: set[str] = set()
        self.alarms: dict[str, Alarm] = {}
        self.alarm_history: deque[Alarm] = deque(maxlen=ALARM_HISTORY_KEPT)
        self.devices: dict[str, DeviceStatus] = {}
        self.selected_job: str | None = None
        self.events_applied = 0

    # -- folding events -------------------------------------------------------------------------

    def apply_all(self, events: Iterable[Event]) -> set[Area]:
        """Fold events in order; the areas they changed."""
        changed: set[Area] = set()
        for event in events:
            changed |= self.apply(event)
        return changed

    def apply(self, event: Event) -> set[Area]:
        """Fold one event in and say what it changed.

        Events of other stations only register the station's name.
        """
        changed: set[Area] = set()
        station = station_of(event)
        if station not in self.stations:
            self.stations.append(station)
            changed.add(Area.STATIONS)
        if self.station is None:
            self.station = station
        if station != self.station:
            return changed
        self.events_applied += 1
        if isinstance(event, LiveReading):
            self._apply_live(event)
            changed.add(Area.LIVE)
        elif isinstance(event, CaptureStateChanged):
            self.capture = event
            changed.add(Area.CAPTURE)
        elif isinstance(event, MeasurementCaptured):
            if self.add_measurement(event.measurement):
                changed.add(Area.MEASUREMENTS)
        elif isinstance(event, AlarmChanged):
            self._apply_alarm(event.alarm)
            changed.add(Area.ALARMS)
        else:
            self.devices[event.device] = event
            changed.add(Area.DEVICES)
        return changed

    def _apply_live(self, event: LiveReading) -> None:
        trace = self.channels.get(event.channel)
        if trace is None:
            trace = self.channels[event.channel] = ChannelTrace(event.channel)
        trace.values_g.append(event.value_g)
        trace.last_value_g = event.value_g
        trace.last_t_mono_s = event.t_mono_s
        trace.flags = event.flags
        trace.samples += 1

    def add_measurement(self, m: Measurement) -> bool:
        """Add a measurement (live or back-filled from storage); a repeated id is ignored.

        Returns whether it was added.
        """
        key = str(m.id)
        if key in self._measurement_ids:
            return False
        if len(self.measurements) == self.measurements.maxlen:
            self._measurement_ids.discard(str(self.measurements[0].id))
        self._measurement_ids.add(key)
        self.measurements.append(m)
        return True

    def sort_measurements(self) -> None:
        """Order by capture time after a back-fill merged older rows in."""
        ordered = sorted(self.measurements, key=lambda m: (m.time_utc, m.seq))
        self.measurements = deque(ordered, maxlen=MEASUREMENTS_KEPT)

    def _apply_alarm(self, alarm: Alarm) -> None:
        self.alarm_history.append(alarm)
        if alarm.active:
            self.alarms[alarm.key] = alarm
        else:
            self.alarms.pop(alarm.key, None)

    def switch_station(self, station: str) -> None:
        """Show another station; what was folded for the old one is dropped."""
        kept_stations = self.stations
        self.__init__(station)  # type: ignore[misc]
        self.stations = kept_stations

    # -- questions the views ask ------------------------------------------------------------------

    @property
    def last_measurement(self) -> Measurement | None:
        return self.measurements[-1] if self.measurements else None

    @property
    def capture_state(self) -> CaptureState | None:
        return self.capture.state if self.capture is not None else None

    def load_g(self) -> float | None:
        """The load on the beam now: the sum of every channel's latest value (None: no channel)."""
        values = [t.last_value_g for t in self.channels.values() if t.last_value_g is not None]
        return sum(values) if values else None

    def device_reading_g(self, device: str) -> float | None:
        """The latest value in grams of a device's first channel (``<device>/0``), if it reports."""
        trace = self.channels.get(f"{device}/0") or self.channels.get(device)
        return None if trace is None else trace.last_value_g

    def active_alarms(self) -> list[Alarm]:
        """Active alarms, unacknowledged first, newest first within each group."""
        alarms = sorted(self.alarms.values(), key=lambda a: a.time_utc, reverse=True)
        return sorted(alarms, key=lambda a: a.acknowledged)

    def unacknowledged(self) -> list[Alarm]:
        return [a for a in self.active_alarms() if not a.acknowledged]

    def jobs(self) -> list[str]:
        """Jobs seen in measurements, in order of first appearance."""
        seen: dict[str, None] = {}
        for m in self.measurements:
            if m.job:
                seen.setdefault(m.job, None)
        return list(seen)

    def current_job(self) -> str | None:
        """The job the set view shows: the one selected here, else the latest measured."""
        if self.selected_job:
            return self.selected_job
        for m in reversed(self.measurements):
            if m.job:
                return m.job
        return None

    def job_measurements(self, job: str | None) -> list[Measurement]:
        return [m for m in self.measurements if m.job == job]

    # -- snapshots the widgets hold ---------------------------------------------------------------

    def channel_views(self) -> tuple[ChannelView, ...]:
        return tuple(
            ChannelView(t.channel, t.last_value_g, t.flags, tuple(t.values_g))
            for t in self.channels.values()
        )

    def alarm_log(self) -> AlarmLog:
        return AlarmLog(tuple(self.alarm_history), dict(self.alarms))

    def set_data(self) -> SetData:
        job = self.current_job()
        return SetData(job, tuple(self.job_measurements(job)))

    def settling_load_g(self) -> float | None:
        """The load now while the capture cycle settles (the capture line shows it), else None."""
        return self.load_g() if self.capture_state is CaptureState.SETTLING else None

    def device_readings_g(self) -> dict[str, float | None]:
        """Each device's latest value in grams, from its first channel's live trace."""
        return {device: self.device_reading_g(device) for device in self.devices}


def find_check(m: Measurement, check: str) -> CheckResult | None:
    """The named spec check of a measurement, if it was judged on it."""
    for c in m.checks:
        if c.check == check:
            return c
    return None


_WEDGES = ("PW", "AW", "GW", "SW", "LW", "UW")


def club_order_key(club: str | None) -> tuple[int, float, str]:
    """Sort clubs the way a set reads: woods/hybrids/irons by number, then wedges, then the rest.

    ``'3i' < ... < '9-iron' < 'PW' < 'GW' < 'SW' < 'LW'``; unknown names sort last, by name.
    """
    if not club:
        return (9, 0.0, "")
    name = club.strip().upper()
    family = {"W": 0, "H": 1, "I": 2}
    m = re.fullmatch(r"(\d+)[\s-]*([A-Z]*)", name)  # '7i', '7 iron', '7-iron', '3W', '4H'

    if m:
        suffix = m.group(2)[:1] or "I"
        return (family.get(suffix, 3), float(m.group(1)), name)
    if name in _WEDGES:
        return (4, float(_WEDGES.index(name)), name)
    return (5, 0.0, name)
