"""Invented Larkspur Clubworks records for the report tests (demo data only, not check values).

A set of irons 4-PW built to D2 ± 0.5 with each club's total weight within ± 3 g of its own
target; the 8-iron is built heavy (a FAIL) and measured again after a fix, and the PW lands near
the lower limit. Checks and verdicts are filled in the way the service's spec judge words them.
"""

from __future__ import annotations

from datetime import date, datetime, timedelta
from pathlib import Path

from heft.daemon.measurement import CheckResult, Measurement, Verdict
from heft.daemon.records import CalibrationRecord
from heft.daemon.storage import Store
from tests.sample_records import T0, make_calibration, make_measurement

JOB = "LCW-2611"
TARGET_POINTS = 32.0  # D2 (domain.md: D0 = 30 points)
TOLERANCE_POINTS = 0.5
WEIGHT_TOLERANCE_G = 3.0
NEAR_FRACTION = 0.2
CAL_IDS = ("lcw-span-beam0", "lcw-span-beam1")

# (club, club id, total weight g, balance point in, the club's weight target g)
LARKSPUR_SET: tuple[tuple[str, str, float, float, float], ...] = (
    ("4-iron", "LCW-2611-4I", 386.4, 29.88, 386.0),
    ("5-iron", "LCW-2611-5I", 392.8, 29.69, 393.0),
    ("6-iron", "LCW-2611-6I", 399.1, 29.40, 400.0),
    ("7-iron", "LCW-2611-7I", 405.6, 29.18, 406.0),
    ("8-iron", "LCW-2611-8I", 412.2, 29.32, 413.0),  # heavy: about D5.3, a FAIL
    ("9-iron", "LCW-2611-9I", 419.5, 28.66, 420.0),
    ("PW", "LCW-2611-PW", 427.9, 28.32, 428.0),  # about D1.5: near the lower limit
)
FIXED_8_IRON = ("8-iron", "LCW-2611-8I", 410.9, 29.00, 413.0)  # re-measured after a fix


def _band_verdict(value: float, low: float, high: float) -> Verdict:
    margin = NEAR_FRACTION * (high - low) / 2
    if value < low or value > high:
        return Verdict.FAIL
    if value < low + margin or value > high - margin:
        return Verdict.NEAR_LIMIT
    return Verdict.PASS


def larkspur_record(
    seq: int,
    club: str,
    club_id: str,
    weight_g: float,
    balance_point_in: float,
    weight_target_g: float,
    *,
    time_utc: datetime | None = None,
    station: str = "bench-1",
) -> Measurement:
    """One measurement of a Larkspur club with uncertainties, checks and its verdict."""
    m = make_measurement(seq, station=station, time_utc=time_utc, job=JOB,
                         total_weight_g=weight_g, balance_point_in=balance_point_in)  # fmt: skip
    points = m.swingweight_points
    sw_low, sw_high = TARGET_POINTS - TOLERANCE_POINTS, TARGET_POINTS + TOLERANCE_POINTS
    w_low, w_high = weight_target_g - WEIGHT_TOLERANCE_G, weight_target_g + WEIGHT_TOLERANCE_G
    checks = [
        CheckResult(check="swingweight", verdict=_band_verdict(points, sw_low, sw_high),
                    value=points, low=sw_low, high=sw_high,
                    message=f"swing weight {m.swingweight} (D2 ± 0.5)"),
        CheckResult(check="total_weight", verdict=_band_verdict(weight_g, w_low, w_high),
                    value=weight_g, low=w_low, high=w_high,
                    message=f"total weight {weight_g} g ({w_low:g} to {w_high:g} g)"),
    ]  # fmt: skip
    order = [Verdict.PASS, Verdict.NEAR_LIMIT, Verdict.FAIL]
    verdict = max((c.verdict for c in checks), key=order.index)
    return m.model_copy(
        update={
            "club": club,
            "club_id": club_id,
            "spec": "larkspur-irons",
            "total_weight_g_u": 0.23,
            "balance_point_in_u": 0.031,
            "swingweight_points_u": 0.27,
            "checks": checks,
            "verdict": verdict,
            "calibration_ids": list(CAL_IDS),
        }
    )


def larkspur_measurements() -> list[Measurement]:
    """The set in capture order, a club every 40 s, then the 8-iron again 10 minutes later."""
    out = [
        larkspur_record(i, *club, time_utc=T0 + timedelta(seconds=40 * i))
        for i, club in enumerate(LARKSPUR_SET, start=1)
    ]
    out.append(larkspur_record(len(out) + 1, *FIXED_8_IRON, time_utc=T0 + timedelta(minutes=10)))
    return out


def larkspur_calibrations() -> list[CalibrationRecord]:
    """Span records of both beam channels, calibrated 20 days before, due 70 days after."""
    return [
        make_calibration(f"beam/{n}", "span", T0 - timedelta(days=20)).model_copy(
            update={"id": cal_id, "next_due": date(2027, 2, 8)}
        )
        for n, cal_id in enumerate(CAL_IDS)
    ]


def larkspur_store(path: Path) -> Path:
    """A real station store at ``path`` holding the set and its calibrations."""
    with Store(path) as store:
        for rec in larkspur_calibrations():
            store.add_calibration(rec)
        for m in larkspur_measurements():
            store.add_measurement(m)
    return path
