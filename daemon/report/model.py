"""The report model: stored records gathered into what a set/job report shows (pure, no I/O).

:func:`build_report` takes measurements and calibration records (from a store, or made in a
test) and returns a :class:`Report`: the header, one row per club in capture order (a club
measured again shows its latest measurement, the earlier ones as its history), the summary and
the calibration chain. Every number is already rounded to what the instrument resolves
(:mod:`heft.daemon.report.values`), so the HTML, the PDF and the plots print the same figures.
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass, replace
from datetime import datetime, tzinfo
from decimal import Decimal
from typing import Final

from heft.daemon.calibration import CONFIG_ID_PREFIX
from heft.daemon.measurement import CheckResult, Measurement, Verdict
from heft.daemon.records import CalibrationRecord
from heft.daemon.report.values import (
    BALANCE_STEP_IN,
    POINTS_STEP,
    WEIGHT_STEP_G,
    Band,
    Quantity,
    fixed,
    points_text,
    round_half_up,
)

TIME_FORMAT: Final = "%Y-%m-%d %H:%M:%S"

UNCERTAINTY_STATEMENT: Final = (
    "Each ± value is the expanded uncertainty U = k·u with coverage factor k = 2: the "
    "interval value ± U is expected to contain the true value with a probability of about "
    "95 %. The standard uncertainty u combines the repeatability of the readings while the "
    "club lay still (standard deviation of their mean), the resolution of each reading and the "
    "stated uncertainty of the bench geometry (support positions or lever arm), propagated to "
    "weight, balance point and swing weight after the GUM (JCGM 100:2008, Evaluation of "
    "measurement data — Guide to the expression of uncertainty in measurement). It does not "
    "include the uncertainty of the reference masses the calibrations used. Values are "
    "rounded to what the instrument resolves (0.1 g, 0.01 in, 0.1 swing-weight point); "
    "uncertainties are rounded up."
)

# Fields that later work adds to the records (customer, order, operator, set). Each shows in the
# header only when some record carries it; until then the header simply has no such line.
OPTIONAL_HEADER_FIELDS: Final[tuple[tuple[str, str], ...]] = (
    ("customer_ref", "Customer"),
    ("order_ref", "Order"),
    ("set_id", "Set"),
    ("operator", "Operator"),
)

VERDICT_TEXT: Final[Mapping[Verdict, str]] = {
    Verdict.PASS: "PASS",
    Verdict.NEAR_LIMIT: "NEAR LIMIT",
    Verdict.FAIL: "FAIL",
    Verdict.NO_SPEC: "NO SPEC",
}


@dataclass(frozen=True, slots=True)
class ClubRow:
    """One measurement of one club, rounded for print; ``history`` holds earlier ones."""

    number: int  # position in the report, 1-based (the plots' x axis)
    station: str
    seq: int
    time_utc: datetime
    time_text: str
    club_id: str | None
    club: str | None
    weight_g: Quantity
    balance_point_in: Quantity
    swingweight_points: Quantity
    swingweight_label: str
    swingweight_u_text: str | None
    swingweight_band: Band | None
    weight_band: Band | None
    balance_band: Band | None
    verdict: Verdict
    check_verdicts: tuple[tuple[str, Verdict], ...]  # (check, its verdict) for each spec check
    notes: tuple[str, ...]  # the messages of checks that failed or came near a limit
    calibration_ids: tuple[str, ...]
    history: tuple[ClubRow, ...] = ()

    @property
    def verdict_text(self) -> str:
        return VERDICT_TEXT[self.verdict]

    def check_verdict(self, check: str) -> Verdict:
        """The verdict of one check ('swingweight', 'total_weight'); NO_SPEC when not checked."""
        return dict(self.check_verdicts).get(check, Verdict.NO_SPEC)


@dataclass(frozen=True, slots=True)
class Summary:
    clubs: int
    measurements: int
    remeasured: int  # clubs measured more than once
    passes: int
    near_limit: int
    fails: int
    no_spec: int


@dataclass(frozen=True, slots=True)
class CalibrationEntry:
    """One calibration record behind the numbers (or what is known of one not in the store)."""

    id: str
    channel: str
    kind: str
    when_text: str | None
    due_text: str | None
    reference_text: str | None  # '1000.0 g, class M1, id LCW-REF-1000'
    device_text: str | None
    operator: str | None
    passed: bool | None
    source: str  # 'store', 'config' (the station's config file), 'missing'
    used_by: int  # measurements in this report that used it
    overdue_when_used: bool  # some measurement was taken after its due date


@dataclass(frozen=True, slots=True)
class Report:
    title: str
    header: tuple[tuple[str, str], ...]  # (label, text) pairs, only those that are known
    zone: str
    rows: tuple[ClubRow, ...]
    summary: Summary
    calibrations: tuple[CalibrationEntry, ...]
    generator: str  # the heft version that wrote the report
    uncertainty_statement: str = UNCERTAINTY_STATEMENT


def _check(m: Measurement, name: str) -> CheckResult | None:
    return next((c for c in m.checks if c.check == name), None)


def _band(m: Measurement, name: str, step: Decimal, points: bool = False) -> Band | None:
    c = _check(m, name)
    return Band.of(c.low, c.high, step, points) if c is not None else None


def club_row(m: Measurement, number: int, tz: tzinfo) -> ClubRow:
    """One measurement as the report prints it (times in ``tz``)."""
    sw = Quantity.of(m.swingweight_points, m.swingweight_points_u, POINTS_STEP)
    return ClubRow(
        number=number,
        station=m.station,
        seq=m.seq,
        time_utc=m.time_utc,
        time_text=m.time_utc.astimezone(tz).strftime(TIME_FORMAT),
        club_id=m.club_id,
        club=m.club,
        weight_g=Quantity.of(m.total_weight_g, m.total_weight_g_u, WEIGHT_STEP_G),
        balance_point_in=Quantity.of(m.balance_point_in, m.balance_point_in_u, BALANCE_STEP_IN),
        swingweight_points=sw,
        swingweight_label=points_text(m.swingweight_points),
        swingweight_u_text=sw.u_text,
        swingweight_band=_band(m, "swingweight", POINTS_STEP, points=True),
        weight_band=_band(m, "total_weight", WEIGHT_STEP_G),
        balance_band=_band(m, "balance_point", BALANCE_STEP_IN),
        verdict=m.verdict,
        check_verdicts=tuple((c.check, c.verdict) for c in m.checks),
        notes=tuple(
            c.message for c in m.checks if c.verdict in (Verdict.FAIL, Verdict.NEAR_LIMIT)
        ),
        calibration_ids=tuple(m.calibration_ids),
    )


def group_remeasured(measurements: Iterable[Measurement]) -> list[list[Measurement]]:
    """Measurements grouped per club, in capture order; each group oldest first.

    A club is its ``club_id``: measured again, it keeps the place of its first capture (its
    place in the set) and its group grows. A measurement without a club id is a club of its own.
    """
    ordered = sorted(measurements, key=lambda m: (m.time_utc, m.station, m.seq))
    groups: list[list[Measurement]] = []
    by_id: dict[str, list[Measurement]] = {}
    for m in ordered:
        if m.club_id is not None and m.club_id in by_id:
            by_id[m.club_id].append(m)
            continue
        group = [m]
        groups.append(group)
        if m.club_id is not None:
            by_id[m.club_id] = group
    return groups


def _summary(rows: Sequence[ClubRow]) -> Summary:
    def count(v: Verdict) -> int:
        return sum(1 for r in rows if r.verdict is v)

    return Summary(
        clubs=len(rows),
        measurements=sum(1 + len(r.history) for r in rows),
        remeasured=sum(1 for r in rows if r.history),
        passes=count(Verdict.PASS),
        near_limit=count(Verdict.NEAR_LIMIT),
        fails=count(Verdict.FAIL),
        no_spec=count(Verdict.NO_SPEC),
    )


def _distinct(values: Iterable[object]) -> list[str]:
    """Distinct non-empty texts in first-seen order."""
    seen: dict[str, None] = {}
    for v in values:
        if isinstance(v, str) and v.strip():
            seen.setdefault(v.strip())
    return list(seen)


def _reference_text(rec: CalibrationRecord) -> str | None:
    ref = rec.reference
    if ref is None:
        return None
    mass = fixed(round_half_up(ref.mass_g, WEIGHT_STEP_G), WEIGHT_STEP_G)
    parts = [f"{mass} g", f"class {ref.weight_class}"]
    if ref.weight_id:
        parts.append(f"id {ref.weight_id}")
    return ", ".join(parts)


def calibration_chain(
    measurements: Sequence[Measurement],
    records: Mapping[str, CalibrationRecord],
    tz: tzinfo,
) -> list[CalibrationEntry]:
    """Every calibration the measurements used, in the order first used."""
    used: dict[str, list[Measurement]] = {}
    for m in measurements:
        for cal_id in _distinct([*m.calibration_ids, *(w.calibration_id for w in m.channels)]):
            used.setdefault(cal_id, []).append(m)
    entries: list[CalibrationEntry] = []
    for cal_id, users in used.items():
        rec = records.get(cal_id)
        if rec is None:
            from_config = cal_id.startswith(CONFIG_ID_PREFIX)
            entries.append(
                CalibrationEntry(
                    id=cal_id,
                    channel=cal_id.removeprefix(CONFIG_ID_PREFIX) if from_config else "",
                    kind="span" if from_config else "",
                    when_text=None,
                    due_text=None,
                    reference_text=None,
                    device_text=None,
                    operator=None,
                    passed=None,
                    source="config" if from_config else "missing",
                    used_by=len(users),
                    overdue_when_used=False,
                )
            )
            continue
        device = " ".join(
            p for p in (rec.device_model, rec.device_serial and f"s/n {rec.device_serial}") if p
        )
        due = rec.next_due
        entries.append(
            CalibrationEntry(
                id=cal_id,
                channel=rec.channel,
                kind=rec.kind,
                when_text=rec.time_utc.astimezone(tz).strftime(TIME_FORMAT),
                due_text=due.isoformat() if due is not None else None,
                reference_text=_reference_text(rec),
                device_text=device or None,
                operator=rec.operator or None,
                passed=rec.passed,
                source="store",
                used_by=len(users),
                overdue_when_used=due is not None
                and any(m.time_utc.astimezone(tz).date() > due for m in users),
            )
        )
    return entries


def _span_text(everything: Sequence[Measurement], tz: tzinfo) -> str:
    first = min(m.time_utc for m in everything).astimezone(tz)
    last = max(m.time_utc for m in everything).astimezone(tz)
    if first.date() == last.date():
        return f"{first:%Y-%m-%d} {first:%H:%M} to {last:%H:%M}"
    return f"{first:%Y-%m-%d %H:%M} to {last:%Y-%m-%d %H:%M}"


def _header(
    everything: Sequence[Measurement],
    tz_name: str,
    generated_utc: datetime,
    generator: str,
    tz: tzinfo,
    selection: Sequence[str],
) -> tuple[tuple[str, str], ...]:
    pairs: list[tuple[str, str]] = []

    def add(label: str, values: Sequence[str]) -> None:
        if values:
            pairs.append((label, ", ".join(values)))

    add("Job", _distinct(m.job for m in everything))
    add("Spec", _distinct(m.spec for m in everything))
    for field, label in OPTIONAL_HEADER_FIELDS:
        add(label, _distinct(getattr(m, field, None) for m in everything))
    add("Station", _distinct(m.station for m in everything))
    add("Measured", [f"{_span_text(everything, tz)} ({tz_name})"])
    add("Selection", list(selection))
    add("Measured with", _distinct(f"heft {m.software_version}" for m in everything))
    generated = generated_utc.astimezone(tz)
    add("Report generated", [f"{generated:{TIME_FORMAT}} ({tz_name}) by heft {generator}"])
    return tuple(pairs)


def build_report(
    measurements: Iterable[Measurement],
    calibrations: Iterable[CalibrationRecord],
    *,
    tz: tzinfo,
    tz_name: str,
    generated_utc: datetime,
    generator: str,
    selection: Sequence[str] = (),
) -> Report | None:
    """The report of ``measurements`` (None when there are none).

    Args:
        calibrations: The store's calibration records; those the measurements used are listed.
        tz: The station's zone; every time is printed in it and the zone is named.
        generator: The heft version writing the report.
        selection: How the records were chosen ('job LC-2417', 'since ...'), printed as given.
    """
    groups = group_remeasured(measurements)
    if not groups:
        return None
    everything = [m for g in groups for m in g]
    rows: list[ClubRow] = []
    for number, group in enumerate(groups, start=1):
        latest = club_row(group[-1], number, tz)
        history = tuple(club_row(m, number, tz) for m in group[:-1])
        rows.append(replace(latest, history=history))
    jobs = _distinct(m.job for m in everything)
    title = f"Club measurement report — job {jobs[0]}" if len(jobs) == 1 else (
        "Club measurement report"
    )
    return Report(
        title=title,
        header=_header(everything, tz_name, generated_utc, generator, tz, selection),
        zone=tz_name,
        rows=tuple(rows),
        summary=_summary(rows),
        calibrations=tuple(
            calibration_chain(everything, {c.id: c for c in calibrations}, tz)
        ),
        generator=generator,
    )
