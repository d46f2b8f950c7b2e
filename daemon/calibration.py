"""Load-cell channel calibration: zero, span from a reference mass, verify with a check mass (pure).

A load-cell channel reports raw ADC counts; grams = (counts - zero_counts) / counts_per_g. The
procedure follows the usual weighing practice (OIML R 76-1 A.4.4.1): zero with nothing on the
supports, then span with a reference mass of stated value, OIML R 111 class and identity, then
verify with a check mass. Each step becomes a :class:`CalibrationRecord` kept in the database;
span records carry the next due date, and the active record of each channel is what converts
its counts (its id goes into every measurement made with it, so results can be traced back if a
calibration is later found wrong, ISO/IEC 17025 6.4.13).

Channels configured with ``source = "config"`` use the file's numbers and carry the id
``config:<channel>``; they have no due date (the config's author owns them).
"""

from __future__ import annotations

import math
import statistics
import uuid
from collections.abc import Sequence
from dataclasses import dataclass
from datetime import date, datetime, timedelta

from heft.daemon.config import ChannelConfig
from heft.daemon.events import AlarmKind
from heft.daemon.records import CalibrationRecord, ReferenceMass
from heft.drivers.reading import DeviceInfo

CONFIG_ID_PREFIX = "config:"
MIN_WINDOW_SAMPLES = 5


class CalibrationError(ValueError):
    """A calibration step that cannot be done (no zero yet, too few samples, unstable, ...)."""


@dataclass(frozen=True, slots=True)
class CountsWindow:
    """Raw counts of one channel gathered while the load sat still."""

    mean_counts: float
    stdev_counts: float
    n: int

    @classmethod
    def of(cls, counts: Sequence[float]) -> CountsWindow:
        if len(counts) < MIN_WINDOW_SAMPLES:
            raise CalibrationError(
                f"only {len(counts)} samples; need at least {MIN_WINDOW_SAMPLES} "
                "(is the device on?)"
            )
        return cls(statistics.fmean(counts), statistics.stdev(counts), len(counts))


@dataclass(frozen=True, slots=True)
class DueStatus:
    """A channel whose calibration is due soon or overdue (``kind`` is the alarm to raise)."""

    channel: str
    kind: AlarmKind
    message: str


def config_record(
    station: str, channel: str, cfg: ChannelConfig, now: datetime
) -> CalibrationRecord:
    """The calibration a ``source = "config"`` channel runs on, as a record (never stored)."""
    assert cfg.zero_counts is not None and cfg.counts_per_g is not None
    return CalibrationRecord(
        id=f"{CONFIG_ID_PREFIX}{channel}",
        station=station,
        channel=channel,
        kind="span",
        time_utc=now,
        zero_counts=cfg.zero_counts,
        counts_per_g=cfg.counts_per_g,
        note="from the station config",
    )


def counts_to_g(record: CalibrationRecord, counts: float) -> float:
    return (counts - record.zero_counts) / record.counts_per_g


def _as_found(record: CalibrationRecord | None, counts: float) -> float | None:
    """What the channel read before an adjustment (None when it could not read grams)."""
    if record is None or not usable(record):
        return None
    return counts_to_g(record, counts)


def _identity(info: DeviceInfo | None) -> dict[str, str]:
    if info is None:
        return {}
    return {
        "device_model": info.model,
        "device_firmware": info.firmware,
        "device_serial": info.serial_number,
    }


def zero_record(
    station: str,
    channel: str,
    window: CountsWindow,
    now: datetime,
    current: CalibrationRecord | None,
    info: DeviceInfo | None = None,
) -> CalibrationRecord:
    """A zero adjustment; keeps the current span (counts_per_g) and its due date.

    With no span yet the record is still written (counts_per_g = 0 marks "not spanned"): it
    documents the zero the coming span will use, and it never converts counts by itself.
    """
    return CalibrationRecord(
        id=str(uuid.uuid4()),
        station=station,
        channel=channel,
        kind="zero",
        time_utc=now,
        zero_counts=window.mean_counts,
        counts_per_g=current.counts_per_g if current is not None else 0.0,
        result_g=_as_found(current, window.mean_counts),
        next_due=current.next_due if current is not None else None,
        note=f"zero window: n={window.n}, stdev={window.stdev_counts:.1f} counts",
        **_identity(info),
    )


def span_record(
    station: str,
    channel: str,
    zero: CalibrationRecord,
    window: CountsWindow,
    reference: ReferenceMass,
    now: datetime,
    interval_days: int,
    current: CalibrationRecord | None = None,
    info: DeviceInfo | None = None,
) -> CalibrationRecord:
    """Span: counts per gram from the reference mass on the supports, against ``zero``.

    ``result_g``/``residual_g`` record the channel "as found" (read with the calibration it had
    before), which is what a reviewer needs to judge results made before this adjustment.
    """
    delta = window.mean_counts - zero.zero_counts
    if abs(delta) < 10 * max(window.stdev_counts, 1.0):
        raise CalibrationError(
            f"the reading moved only {delta:.0f} counts from zero with the reference mass on; "
            "is the mass on the supports?"
        )
    counts_per_g = delta / reference.mass_g
    as_found = _as_found(current, window.mean_counts)
    return CalibrationRecord(
        id=str(uuid.uuid4()),
        station=station,
        channel=channel,
        kind="span",
        time_utc=now,
        zero_counts=zero.zero_counts,
        counts_per_g=counts_per_g,
        reference=reference,
        result_g=as_found,
        residual_g=None if as_found is None else as_found - reference.mass_g,
        next_due=now.date() + timedelta(days=interval_days),
        note=(
            f"span window: n={window.n}, stdev={window.stdev_counts:.1f} counts; "
            "result/residual are as found, before adjustment"
        ),
        **_identity(info),
    )


def default_verify_tolerance_g(mass_g: float, display_step_g: float | None) -> float:
    """Acceptance band for a check mass when none is given: 0.1 % of the mass or 2 d.

    A bench convention (common practice, no source), looser than a class III scale's MPE at
    verification so an honest bench passes and a wrong span (a percent off) does not.
    """
    return max(0.001 * mass_g, 2.0 * (display_step_g or 0.0))


def verify_record(
    station: str,
    channel: str,
    current: CalibrationRecord,
    window: CountsWindow,
    reference: ReferenceMass,
    tolerance_g: float,
    now: datetime,
    info: DeviceInfo | None = None,
) -> CalibrationRecord:
    """Read a check mass with the current calibration; pass when within ``tolerance_g``."""
    if not usable(current):
        raise CalibrationError("the channel has no span yet; calibrate the span first")
    result = counts_to_g(current, window.mean_counts)
    residual = result - reference.mass_g
    return CalibrationRecord(
        id=str(uuid.uuid4()),
        station=station,
        channel=channel,
        kind="verify",
        time_utc=now,
        zero_counts=current.zero_counts,
        counts_per_g=current.counts_per_g,
        reference=reference,
        result_g=result,
        residual_g=residual,
        passed=abs(residual) <= tolerance_g,
        next_due=current.next_due,
        note=f"tolerance {tolerance_g:g} g; against calibration {current.id}",
        **_identity(info),
    )


def active_record(records: Sequence[CalibrationRecord]) -> CalibrationRecord | None:
    """The newest zero or span record of a channel's history (verify records change nothing)."""
    for record in reversed(records):
        if record.kind in ("zero", "span"):
            return record
    return None


def usable(record: CalibrationRecord | None) -> bool:
    """True when the record can turn counts into grams (it has a finite, non-zero span)."""
    return (
        record is not None
        and math.isfinite(record.counts_per_g)
        and record.counts_per_g != 0
        and math.isfinite(record.zero_counts)
    )


def due_status(
    channel: str, record: CalibrationRecord | None, cfg: ChannelConfig, today: date
) -> DueStatus | None:
    """Calibration due (inside the warning days) or overdue (past the date, or never spanned)."""
    if cfg.source == "config":
        return None
    if not usable(record):
        return DueStatus(
            channel, AlarmKind.CALIBRATION_OVERDUE, f"{channel} has no span calibration"
        )
    assert record is not None
    if record.next_due is None:
        return None
    if today > record.next_due:
        return DueStatus(
            channel,
            AlarmKind.CALIBRATION_OVERDUE,
            f"{channel} calibration was due {record.next_due.isoformat()}",
        )
    if today >= record.next_due - timedelta(days=cfg.calibration_warn_days):
        return DueStatus(
            channel,
            AlarmKind.CALIBRATION_DUE,
            f"{channel} calibration is due {record.next_due.isoformat()}",
        )
    return None
