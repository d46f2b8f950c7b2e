"""The bench pipeline: driver outputs in, events and measurements out (pure: no loop, no I/O).

One object does, for live runs and for ``heft replay`` alike::

    Reading (counts or g) -> calibration (counts -> g) -> tare -> CaptureEngine
        -> Captured windows -> geometry -> ClubNumbers (with uncertainties) -> spec verdict
        -> Measurement -> MeasurementCaptured event

Every step returns its outputs in order: live readings, capture-state changes, captured
measurements and alarm conditions (:class:`~heft.daemon.alarms.AlarmCondition`: raise or clear;
the pipeline keeps no alarm state). The caller routes them: the service stores measurements
before publishing anything and applies alarm conditions to the station's alarms; replay prints
the measurements. Time comes in two forms,
both passed in: each reading's monotonic ``t_mono_s`` (the recording's clock in replay) and
``clock_utc`` for wall-clock stamps.

Geometries and how captures pair:

* ``two_support``: one capture engine over both supports; its capture is the club.
* ``lever_beam``: one engine for the beam's force channel and one for the gram scale; the club
  is the pair of the latest beam capture and the latest weighing within ``pairing_window_s``,
  whichever came first.
* ``single_scale``: one engine for the scale, paired with a balance point entered before or
  after the weighing (command or scanner tag).
"""

from __future__ import annotations

import logging
import math
from collections import deque
from collections.abc import Callable, Iterable, Mapping, Sequence
from dataclasses import dataclass, field
from datetime import datetime

from heft.daemon.alarms import AlarmCondition
from heft.daemon.calibration import config_record, counts_to_g, usable
from heft.daemon.capture import Captured, CaptureEngine, StateChanged, WindowStats
from heft.daemon.capture import Warning as CaptureWarning
from heft.daemon.club_measure import REPLAY_NAMESPACE as REPLAY_NAMESPACE
from heft.daemon.club_measure import club_numbers, measurement_id, measurement_of
from heft.daemon.config import (
    LeverBeamGeometry,
    SingleScaleGeometry,
    SpecConfig,
    StationConfig,
    TwoSupportGeometry,
)
from heft.daemon.events import (
    AlarmKind,
    CaptureState,
    CaptureStateChanged,
    LiveReading,
    MeasurementCaptured,
)
from heft.daemon.measurement import Verdict
from heft.daemon.physics.statics import StaticsError
from heft.daemon.records import CalibrationRecord
from heft.daemon.selection import SelectionError as SelectionError
from heft.daemon.selection import (
    balance_point_in,
    check_spec,
    clean_club_id,
    spec_of_job,
    split_tag,
)
from heft.daemon.specs import judge
from heft.daemon.stillness import motion
from heft.daemon.version import __version__
from heft.drivers.reading import ChannelRef, ClubTag, DeviceInfo, DriverOutput, Reading, ValueKind

log = logging.getLogger("heft.pipeline")

# Raw values kept per channel for tare and calibration windows (80 samples/s for ~25 s).
RECENT_SAMPLES = 2048


# What a pipeline step hands out, in order (events for the bus, and alarm conditions).
PipelineOutput = LiveReading | CaptureStateChanged | MeasurementCaptured | AlarmCondition


@dataclass(frozen=True, slots=True)
class Tared:
    """What a tare did: the channels tared and the outputs it caused (capture restarts)."""

    channels: list[str]
    outputs: list[PipelineOutput]


@dataclass(frozen=True, slots=True)
class _GroupCapture:
    """A capture of one engine, waiting to be paired (lever beam, single scale)."""

    t_s: float
    windows: Mapping[str, WindowStats]


@dataclass
class _Group:
    name: str
    channels: tuple[str, ...]
    engine: CaptureEngine


@dataclass
class _ChannelState:
    ref: ChannelRef
    recent: deque[tuple[float, float]] = field(default_factory=lambda: deque(maxlen=RECENT_SAMPLES))
    tare_g: float = 0.0
    counts: bool = False  # the device reports raw counts (a load cell), not grams


class BenchPipeline:
    """Pure processing of one station's device outputs.

    Args:
        config: The validated station config.
        clock_utc: Wall clock for measurement and alarm stamps (replay passes a virtual one).
        calibrations: Active calibration record per load-cell channel (from the database).
        first_seq: The station's next unused sequence number.
        replay_source: When set (replay), measurement ids are uuid5 of this text and the seq,
            so the same recording always gives the same ids.
        software_version: Stamped on every measurement.
    """

    def __init__(
        self,
        config: StationConfig,
        clock_utc: Callable[[], datetime],
        *,
        calibrations: Mapping[str, CalibrationRecord] | None = None,
        first_seq: int = 1,
        replay_source: str | None = None,
        software_version: str = __version__,
    ) -> None:
        self.config = config
        self.station = config.station
        self._clock_utc = clock_utc
        self._out: list[PipelineOutput] = []
        self.next_seq = first_seq
        self._replay_source = replay_source
        self._software_version = software_version
        self.job: str | None = config.job
        self.spec_name: str | None = config.active_spec_name()
        self.club: str | None = config.club
        self.club_id: str | None = None
        self.balance_point_in: float | None = None  # waiting for its weighing
        self.entered_balance_point_in: float | None = None  # the last one entered (kept)
        self.device_info: dict[str, DeviceInfo] = {}
        self.calibrations: dict[str, CalibrationRecord] = {}
        for channel, cfg in config.channels.items():
            if cfg.source == "config":
                self.calibrations[channel] = config_record(
                    config.station, channel, cfg, clock_utc()
                )
        for channel, record in (calibrations or {}).items():
            if config.channel(channel).source == "database":
                self.calibrations[channel] = record
        self._channels: dict[str, _ChannelState] = {}
        self._groups = self._make_groups()
        self._group_of: dict[str, _Group] = {ch: g for g in self._groups for ch in g.channels}
        for ch in self._group_of:
            self._channels[ch] = _ChannelState(ChannelRef.parse(ch))
        self._pending: dict[str, _GroupCapture] = {}
        self._last_t = 0.0

    # ----------------------------------------------------------------------- construction

    def _make_groups(self) -> list[_Group]:
        geometry = self.config.geometry
        params = self.config.capture
        if isinstance(geometry, TwoSupportGeometry):
            specs = [("club", geometry.channels)]
        elif isinstance(geometry, LeverBeamGeometry):
            force, weight = geometry.channels
            specs = [("beam", (force,)), ("weight", (weight,))]
        else:
            specs = [("weight", geometry.channels)]
        return [_Group(name, chans, CaptureEngine(list(chans), params)) for name, chans in specs]

    @property
    def channels(self) -> tuple[str, ...]:
        """Every channel the geometry reads."""
        return tuple(self._group_of)

    # ----------------------------------------------------------------------- input

    def feed(self, output: DriverOutput) -> list[PipelineOutput]:
        """Process one driver output; returns the events it caused, in order."""
        if isinstance(output, Reading):
            self._on_reading(output)
        elif isinstance(output, ClubTag):
            self._on_tag(output)
        elif isinstance(output, DeviceInfo):
            self.device_info[output.device] = output
        return self._take()

    def tick(self, t_mono_s: float) -> list[PipelineOutput]:
        """Advance time with no new reading (timeouts: will not settle, a silent channel)."""
        self._last_t = max(self._last_t, t_mono_s)
        for group in self._groups:
            self._handle(group, group.engine.tick(t_mono_s))
        return self._take()

    def device_lost(self, device: str) -> list[PipelineOutput]:
        """A device's port is gone: a capture settling on its channels starts over.

        The engine also restarts a channel's windows after any gap longer than
        ``max_gap_s`` (the service waits at least that long before reopening a port), so no
        window joins samples from before and after a disconnect. A club already captured stays
        captured (it is not measured twice when the device comes back).
        """
        for group in self._groups:
            on_device = any(self._channels[ch].ref.device == device for ch in group.channels)
            if on_device and group.engine.state in (CaptureState.SETTLING, CaptureState.UNSETTLED):
                self._handle(group, group.engine.rearm())
        for state in self._channels.values():
            if state.ref.device == device:
                state.recent.clear()
        return self._take()

    def is_loaded(self, channel: str) -> bool:
        """True while the capture group of ``channel`` has something on its supports."""
        group = self._group_of.get(channel)
        return group is not None and group.engine.state in (
            CaptureState.SETTLING,
            CaptureState.UNSETTLED,
            CaptureState.CAPTURED,
            CaptureState.HOLDING,
        )

    def _on_reading(self, r: Reading) -> None:
        channel = str(r.ref)
        state = self._channels.get(channel)
        if state is None:
            return  # a channel the geometry does not use
        self._last_t = max(self._last_t, r.t_mono_s)
        flags = r.flags
        if r.usable and math.isfinite(r.value):
            state.recent.append((r.t_mono_s, r.value))  # raw: calibration windows use counts
        state.counts = r.kind is ValueKind.COUNTS
        if state.counts:
            record = self.calibrations.get(channel)
            if record is None or not usable(record):
                return  # no span yet: counts cannot become grams (alarm raised by the service)
            value_g = counts_to_g(record, r.value) if math.isfinite(r.value) else math.nan
        else:
            value_g = r.value
        net_g = value_g - state.tare_g if math.isfinite(value_g) else value_g
        if math.isfinite(net_g):
            self._out.append(LiveReading(station=self.station, channel=channel, t_mono_s=r.t_mono_s,
                                          value_g=net_g, flags=flags))
        group = self._group_of[channel]
        self._handle(group, group.engine.on_sample(channel, r.t_mono_s, net_g, flags))

    def _on_tag(self, tag: ClubTag) -> None:
        """A scanned club id; on a single-scale station also a balance point (split_tag)."""
        geometry = self.config.geometry
        text = tag.club_id.strip()
        if not isinstance(geometry, SingleScaleGeometry):
            self.club_id = text
            return
        club_id, bp = split_tag(text, geometry.balance_point_prefix)
        if club_id:
            self.club_id = club_id  # before the balance point, which may complete a weighing
        if bp is not None:
            try:
                self._set_balance_point(bp, tag.t_mono_s)
            except SelectionError as err:
                log.warning("scanner %s: %s", tag.device, err)

    # ----------------------------------------------------------------------- engine events

    def _handle(self, group: _Group, events: Iterable[object]) -> None:
        for ev in events:
            if isinstance(ev, StateChanged):
                detail = ev.detail if len(self._groups) == 1 else f"{group.name}: {ev.detail}"
                self._out.append(CaptureStateChanged(station=self.station, state=ev.state,
                                                     t_mono_s=ev.t_s, detail=detail))
            elif isinstance(ev, CaptureWarning):
                kind = _WARNING_ALARMS.get(ev.kind)
                if kind is not None:
                    source = ev.channel or group.name
                    message = ev.message if ev.active else "cleared"
                    self._out.append(AlarmCondition(kind, source, ev.active, message))
            elif isinstance(ev, Captured):
                self._on_captured(group, ev)

    def _on_captured(self, group: _Group, ev: Captured) -> None:
        geometry = self.config.geometry
        capture = _GroupCapture(ev.t_s, dict(ev.windows))
        if isinstance(geometry, TwoSupportGeometry):
            self._measure([capture], ev.t_s)
            return
        self._pending[group.name] = capture
        # Drop partners too old to pair with this capture.
        for name, other in list(self._pending.items()):
            if ev.t_s - other.t_s > geometry.pairing_window_s:
                del self._pending[name]
        if isinstance(geometry, LeverBeamGeometry):
            if "beam" in self._pending and "weight" in self._pending:
                pair = [self._pending.pop("beam"), self._pending.pop("weight")]
                self._measure(pair, ev.t_s)
        elif self.balance_point_in is not None:
            self._measure([self._pending.pop("weight")], ev.t_s)

    # ----------------------------------------------------------------------- measurement

    def _measure(self, captures: list[_GroupCapture], t_s: float) -> None:
        windows = {ch: w for c in captures for ch, w in c.windows.items()}
        try:
            numbers = club_numbers(
                self.config.geometry, self.config.capture, windows, self.balance_point_in
            )
        except StaticsError as err:
            self._out.append(
                CaptureStateChanged(station=self.station, state=CaptureState.HOLDING, t_mono_s=t_s,
                                    detail=f"not a club: {err}")
            )
            return
        spec = self.spec
        verdict = judge(
            spec,
            self.club,
            total_weight_g=numbers.total_weight_g,
            balance_point_in=numbers.balance_point_in,
            swingweight_points=numbers.swingweight_points,
        )
        seq = self.next_seq
        self.next_seq += 1
        m = measurement_of(
            numbers,
            windows,
            self.calibrations,
            id=measurement_id(self._replay_source, seq),
            station=self.station,
            seq=seq,
            time_utc=self._clock_utc(),
            t_s=t_s,
            club_id=self.club_id,
            job=self.job,
            spec=self.spec_name,
            club=self.club,
            verdict=verdict,
            software_version=self._software_version,
        )
        self.club_id = None
        self.balance_point_in = None
        self._out.append(MeasurementCaptured(measurement=m))
        if verdict.verdict is Verdict.FAIL:
            failed = "; ".join(c.message for c in verdict.failed)
            self._out.append(AlarmCondition(
                AlarmKind.OUT_OF_SPEC, "station", True, f"club {m.club_id or f'#{seq}'}: {failed}"
            ))
        elif verdict.verdict is not Verdict.NO_SPEC:
            self._out.append(
                AlarmCondition(AlarmKind.OUT_OF_SPEC, "station", False, f"club #{seq} in spec")
            )

    # ----------------------------------------------------------------------- selections

    @property
    def spec(self) -> SpecConfig | None:
        return self.config.specs.get(self.spec_name) if self.spec_name is not None else None

    def select_job(self, job: str) -> None:
        self.spec_name = spec_of_job(self.config, job)
        self.job = job
        self.club = None

    def select_spec(self, spec: str, club: str | None = None) -> None:
        check_spec(self.config, spec, club)
        self.spec_name = spec
        self.club = club

    def set_club_id(self, club_id: str) -> None:
        self.club_id = clean_club_id(club_id)

    def set_balance_point(
        self, value: str | float, t_mono_s: float | None = None
    ) -> list[PipelineOutput]:
        """Balance point of the club being weighed (single-scale geometry); may complete it."""
        self._set_balance_point(value, t_mono_s)
        return self._take()

    def _set_balance_point(self, value: str | float, t_mono_s: float | None) -> None:
        geometry = self.config.geometry
        if not isinstance(geometry, SingleScaleGeometry):
            raise SelectionError(
                f"a balance point is entered only on a single_scale station (this one is "
                f"{geometry.type})"
            )
        bp = balance_point_in(value)
        self.balance_point_in = self.entered_balance_point_in = bp
        t = self._last_t if t_mono_s is None else t_mono_s
        weighing = self._pending.get("weight")
        if weighing is not None and t - weighing.t_s <= geometry.pairing_window_s:
            self._measure([self._pending.pop("weight")], t)

    def tare(self, device: str | None, window_s: float = 0.5) -> Tared:
        """Take the mean of the last ``window_s`` of each channel (of ``device``) as its tare.

        Returns the channels tared and the outputs; raises SelectionError when one has no recent
        readings or was moving during the window (a tare taken mid-motion offsets every later
        weight), and then tares none.
        """
        chans = [c for c, st in self._channels.items() if device in (None, st.ref.device)]
        if not chans:
            raise SelectionError(f"no channel of device {device!r} is used by the geometry")
        tares: dict[str, float] = {}
        for ch in chans:
            gross = self.recent_grams(ch, window_s)
            if not gross:
                raise SelectionError(f"{ch} has no recent readings to tare on")
            why = self.motion(ch, gross, in_grams=not self._channels[ch].counts
                              or usable(self.calibrations.get(ch)))
            if why is not None:
                raise SelectionError(f"{ch} was moving during the tare: {why}; "
                                     "hold it still and try again")
            tares[ch] = sum(gross) / len(gross)
        for ch, value in tares.items():
            self._channels[ch].tare_g = value
            self._handle(self._group_of[ch], self._group_of[ch].engine.reset_zero(ch))
        return Tared(sorted(tares), self._take())

    def rearm(self) -> list[PipelineOutput]:
        for group in self._groups:
            self._handle(group, group.engine.rearm())
        self._pending.clear()
        return self._take()

    def set_calibration(self, record: CalibrationRecord) -> None:
        """Make ``record`` the channel's active calibration (after zero or span)."""
        self.calibrations[record.channel] = record

    # ----------------------------------------------------------------------- raw windows

    def recent_raw(self, channel: str, since_t: float) -> list[float]:
        """Raw values (counts, or grams for scales) of ``channel`` received since ``since_t``."""
        state = self._channels.get(channel)
        if state is None:
            return []
        return [v for t, v in state.recent if t >= since_t]

    def recent_grams(self, channel: str, window_s: float) -> list[float]:
        """Gross grams of the channel's last ``window_s`` seconds (calibrated, before tare)."""
        state = self._channels.get(channel)
        if state is None or not state.recent:
            return []
        end = state.recent[-1][0]
        raw = [v for t, v in state.recent if t >= end - window_s]
        record = self.calibrations.get(channel)
        if record is not None and usable(record):
            return [counts_to_g(record, v) for v in raw]
        return raw

    def noise_g(self, channel: str) -> float:
        """The channel's reading noise (rms, g): learned by its capture engine, else the prior."""
        group = self._group_of.get(channel)
        if group is None:
            return self.config.capture.noise_for(channel)
        return group.engine.noise_g[channel]

    def motion(self, channel: str, values: Sequence[float], *, in_grams: bool) -> str | None:
        """Why ``values`` of ``channel`` are not a still window, or None (daemon.stillness).

        ``in_grams``: the values are grams; else raw counts, judged in grams when the channel
        has a span and by the scale-free test when it has none.
        """
        units: float | None = 1.0
        if not in_grams:
            record = self.calibrations.get(channel)
            units = record.counts_per_g if record is not None and usable(record) else None
        return motion(
            values,
            units_per_g=units,
            noise_g=self.noise_g(channel),
            division_g=self.config.capture.division_for(channel),
        )

    @property
    def last_t(self) -> float:
        return self._last_t

    # ----------------------------------------------------------------------- plumbing

    def _take(self) -> list[PipelineOutput]:
        out, self._out = self._out, []
        return out


_WARNING_ALARMS: dict[str, AlarmKind] = {
    "will_not_settle": AlarmKind.WILL_NOT_SETTLE,
    "overload": AlarmKind.OVERLOAD,
    "zero_out_of_range": AlarmKind.ZERO_OUT_OF_RANGE,
    "needs_zero": AlarmKind.NEEDS_ZERO,
}
