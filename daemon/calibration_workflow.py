"""The calibration workflow of a running station: zero, span, verify and the due-date alarms.

The steps themselves (records, refusals of a bad span, due dates) are pure and live in
:mod:`heft.daemon.calibration`; this part runs them on a live channel: it gathers a window of
raw counts, refuses one that was not still or had a club on the beam, keeps the record in the
database, makes it the channel's active calibration and says which alarms hold.

Its seam is narrow and named: :class:`CalibrationBench` (what it reads of and sets on the
pipeline), :class:`CalibrationLog` (the store's calibration history), an ``alarms`` callable
taking :class:`~heft.daemon.alarms.AlarmCondition` values, and ``wait_s`` (how the window's
time passes: ``asyncio.sleep`` live; a test can feed readings instead).
"""

from __future__ import annotations

import asyncio
from collections.abc import Awaitable, Callable, Iterable, Mapping, Sequence
from dataclasses import dataclass
from datetime import datetime
from typing import Protocol

from heft.daemon.alarms import AlarmCondition
from heft.daemon.calibration import (
    CalibrationError,
    CountsWindow,
    active_record,
    counts_to_g,
    default_verify_tolerance_g,
    due_status,
    span_record,
    usable,
    verify_record,
    zero_record,
)
from heft.daemon.config import StationConfig
from heft.daemon.events import AlarmKind
from heft.daemon.pipeline import SelectionError
from heft.daemon.records import CalibrationRecord, ReferenceMass
from heft.drivers.reading import ChannelRef, DeviceInfo

CALIBRATION_WINDOW_S = 1.5
ZERO_SHIFT_LIMIT_FRACTION = 0.04  # of capacity; OIML R 76-1 4.5.1


class CalibrationBench(Protocol):
    """What the workflow needs of the pipeline (``BenchPipeline`` is one)."""

    @property
    def channels(self) -> tuple[str, ...]: ...

    @property
    def calibrations(self) -> Mapping[str, CalibrationRecord]: ...

    @property
    def device_info(self) -> Mapping[str, DeviceInfo]: ...

    @property
    def last_t(self) -> float: ...

    def is_loaded(self, channel: str) -> bool: ...

    def recent_raw(self, channel: str, since_t: float) -> list[float]: ...

    def motion(self, channel: str, values: Sequence[float], *, in_grams: bool) -> str | None: ...

    def set_calibration(self, record: CalibrationRecord) -> None: ...


class CalibrationLog(Protocol):
    """The calibration history the workflow writes to (``Store`` is one)."""

    def add_calibration(self, rec: CalibrationRecord) -> None: ...

    def calibrations(self, channel: str | None = None) -> list[CalibrationRecord]: ...


@dataclass(frozen=True, slots=True)
class StepResult:
    """A calibration step done: what to tell the operator and the record kept."""

    message: str
    record: CalibrationRecord


def stored_calibrations(
    log: CalibrationLog, channels: Iterable[str]
) -> dict[str, CalibrationRecord]:
    """The active record of each channel that has one in the history (a service start)."""
    found: dict[str, CalibrationRecord] = {}
    for channel in channels:
        record = active_record(log.calibrations(channel))
        if record is not None:
            found[channel] = record
    return found


class CalibrationWorkflow:
    """Zero, span and verify of the load-cell channels of one station.

    Args:
        config: The station config (channel sources, capacities, divisions, intervals).
        bench: The pipeline, through :class:`CalibrationBench`.
        log: Where records are kept, through :class:`CalibrationLog`.
        alarms: Told every alarm condition the workflow finds (due, overdue, failed verify).
        clock_utc: Wall clock for the records' stamps and the due dates.
        window_s: How long a zero, span or verify gathers counts.
        wait_s: Lets the window's time pass (``asyncio.sleep`` live).
    """

    def __init__(
        self,
        config: StationConfig,
        bench: CalibrationBench,
        log: CalibrationLog,
        alarms: Callable[[AlarmCondition], None],
        clock_utc: Callable[[], datetime],
        *,
        window_s: float = CALIBRATION_WINDOW_S,
        wait_s: Callable[[float], Awaitable[None]] = asyncio.sleep,
    ) -> None:
        self.config = config
        self._bench = bench
        self._log = log
        self._alarms = alarms
        self._clock_utc = clock_utc
        self._window_s = window_s
        self._wait_s = wait_s
        self._pending_zero: dict[str, CalibrationRecord] = {}
        self.busy: set[str] = set()  # channels whose window is open now

    # ------------------------------------------------------------------------------ due dates

    def check_due(self) -> None:
        """Raise or clear calibration due/overdue alarms for every database-calibrated channel."""
        today = self._clock_utc().date()
        for channel in self._bench.channels:
            cfg = self.config.channel(channel)
            if cfg.source != "database" or not self.is_counts_channel(channel):
                continue
            status = due_status(channel, self._bench.calibrations.get(channel), cfg, today)
            for kind in (AlarmKind.CALIBRATION_DUE, AlarmKind.CALIBRATION_OVERDUE):
                active = status is not None and status.kind is kind
                message = status.message if active and status is not None else "cleared"
                self._alarms(AlarmCondition(kind, channel, active, message))

    def is_counts_channel(self, channel: str) -> bool:
        """Channels of load-cell drivers read raw counts and need a calibration."""
        device = ChannelRef.parse(channel).device
        return self.config.device(device).driver == "beam" or channel in self.config.channels

    # ------------------------------------------------------------------------------ steps

    async def zero(self, channel: str, operator: str = "") -> StepResult:
        """Take the empty channel's counts as its zero (refused loaded, moving or shifted)."""
        channel = self._counts_channel(channel)
        if self._bench.is_loaded(channel):
            raise CalibrationError(
                f"{channel} has a load on it; lift the club off and zero with the supports empty"
            )
        window = await self._window(channel, "zero")
        if self._bench.is_loaded(channel):
            raise CalibrationError(
                f"{channel} was loaded during the zero; lift the club off and zero with the "
                "supports empty"
            )
        current = self._bench.calibrations.get(channel)
        self._check_zero_shift(channel, window, current)
        record = zero_record(
            self.config.station, channel, window, self._clock_utc(), current,
            self._device_info(channel),
        )
        record = record.model_copy(update={"operator": operator})  # who did it
        await self._keep(record)
        self._pending_zero[channel] = record
        if usable(record):
            self._bench.set_calibration(record)
            return StepResult(f"{channel} zeroed at {record.zero_counts:.0f} counts", record)
        return StepResult(
            f"{channel} zero taken ({record.zero_counts:.0f} counts); span next", record
        )

    async def span(
        self, channel: str, reference: ReferenceMass, operator: str = ""
    ) -> StepResult:
        """Counts per gram from ``reference`` on the supports, against the latest zero."""
        channel = self._counts_channel(channel)
        current = self._bench.calibrations.get(channel)
        zero = self._pending_zero.get(channel) or current
        if zero is None:
            raise CalibrationError(f"{channel} has no zero; run calibrate_zero with it empty first")
        window = await self._window(channel, "span")
        record = span_record(
            self.config.station, channel, zero, window, reference, self._clock_utc(),
            self.config.channel(channel).calibration_interval_days, current,
            self._device_info(channel),
        )
        record = record.model_copy(update={"operator": operator})  # who did it
        await self._keep(record)
        self._pending_zero.pop(channel, None)
        self._bench.set_calibration(record)
        self.check_due()
        return StepResult(
            f"{channel} spanned: {record.counts_per_g:.3f} counts/g, due {record.next_due}",
            record,
        )

    async def verify(
        self,
        channel: str,
        reference: ReferenceMass,
        tolerance_g: float | None = None,
        operator: str = "",
    ) -> StepResult:
        """Read a check mass with the active calibration; a failure raises calibration-due."""
        channel = self._counts_channel(channel)
        current = self._bench.calibrations.get(channel)
        if current is None or not usable(current):
            raise CalibrationError(f"{channel} has no span yet; calibrate the span first")
        window = await self._window(channel, "verify")
        tolerance = tolerance_g or default_verify_tolerance_g(
            reference.mass_g, self.config.capture.division_for(channel)
        )
        record = verify_record(
            self.config.station, channel, current, window, reference, tolerance,
            self._clock_utc(), self._device_info(channel),
        )
        record = record.model_copy(update={"operator": operator})  # who did it
        await self._keep(record)
        if not record.passed:
            self._alarms(AlarmCondition(
                AlarmKind.CALIBRATION_DUE,
                channel,
                True,
                f"{channel} failed verification: read {record.result_g:.2f} g on a "
                f"{reference.mass_g:g} g check mass",
            ))
        verdict = "passed" if record.passed else "FAILED"
        return StepResult(
            f"{channel} verify {verdict}: {record.result_g:.2f} g on {reference.mass_g:g} g "
            f"(residual {record.residual_g:+.2f} g, tolerance {tolerance:g} g)",
            record,
        )

    # ------------------------------------------------------------------------------ helpers

    def _counts_channel(self, channel: str) -> str:
        """``channel`` when it can be calibrated here now; SelectionError saying why not."""
        if channel not in self._bench.channels:
            raise SelectionError(
                f"no channel {channel!r} in the geometry; channels: "
                f"{', '.join(self._bench.channels)}"
            )
        if not self.is_counts_channel(channel):
            raise SelectionError(f"{channel} is a gram scale; calibrate it with its own menu")
        if self.config.channel(channel).source == "config":
            raise SelectionError(
                f"{channel} takes its calibration from the config (source = 'config')"
            )
        if channel in self.busy:
            raise SelectionError(f"{channel} is already being calibrated")
        return channel

    async def _window(self, channel: str, step: str) -> CountsWindow:
        """Raw counts over the next ``window_s`` seconds, refused unless still.

        A window with a load lifted, set down or swinging in it would average the motion into
        the zero or span and offset every later weight (daemon.stillness says when it is still).
        """
        self.busy.add(channel)
        try:
            start = self._bench.last_t
            await self._wait_s(self._window_s)
            counts = self._bench.recent_raw(channel, start + 1e-9)
        finally:
            self.busy.discard(channel)
        window = CountsWindow.of(counts)
        why = self._bench.motion(channel, counts, in_grams=False)
        if why is not None:
            raise CalibrationError(
                f"{channel} was moving during the {step}: {why}; hold it still and try again"
            )
        return window

    def _check_zero_shift(
        self, channel: str, window: CountsWindow, current: CalibrationRecord | None
    ) -> None:
        """Refuse a new zero that moves the old one by more than 4 % of capacity.

        A zero-setting device may not act on more than 4 % of Max (OIML R 76-1 4.5.1); a larger
        shift on a calibrated channel means something is resting on the beam, not drift.
        """
        if current is None or not usable(current):
            return  # first zero of a new channel: nothing to compare with
        shift_g = counts_to_g(current, window.mean_counts)
        limit_g = ZERO_SHIFT_LIMIT_FRACTION * self.config.capture.capacity_for(channel)
        if abs(shift_g) > limit_g:
            raise CalibrationError(
                f"{channel} reads {shift_g:+.1f} g against its current zero, more than the "
                f"{limit_g:.0f} g (4 % of capacity) a zero may move; is something on the beam?"
            )

    def _device_info(self, channel: str) -> DeviceInfo | None:
        return self._bench.device_info.get(ChannelRef.parse(channel).device)

    async def _keep(self, record: CalibrationRecord) -> None:
        await asyncio.to_thread(self._log.add_calibration, record)
