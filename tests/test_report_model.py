"""The report model (pure): rounding, re-measured clubs, summary, header, calibration chain."""

from __future__ import annotations

import uuid
from datetime import UTC, date, datetime, timedelta
from decimal import Decimal
from zoneinfo import ZoneInfo

import pytest

from heft.daemon.measurement import Measurement, Verdict
from heft.daemon.report.model import (
    UNCERTAINTY_STATEMENT,
    Report,
    build_report,
    group_remeasured,
)
from heft.daemon.report.values import Band, Quantity, round_half_up, round_up
from tests.report_records import (
    CAL_IDS,
    JOB,
    larkspur_calibrations,
    larkspur_measurements,
    larkspur_record,
)
from tests.sample_records import T0, make_calibration, make_measurement

GRAMS_PER_OUNCE = 28.349523125  # international avoirdupois ounce, exact by definition (1959)
NOW = datetime(2026, 12, 1, 9, 30, tzinfo=UTC)


def _report(measurements: list[Measurement], tz: str = "UTC", **kw: object) -> Report:
    report = build_report(
        measurements, larkspur_calibrations(), tz=ZoneInfo(tz), tz_name=tz,
        generated_utc=NOW, generator="9.9.9", **kw,  # type: ignore[arg-type]
    )  # fmt: skip
    assert report is not None
    return report


# ------------------------------------------------------------------------------- rounding


def test_values_round_half_up_and_uncertainties_round_up() -> None:
    # Half away from zero on the decimal value as written (ISO 80000-1:2009 Annex B, rule B;
    # from memory); Python's round() would give 28.6 here (28.605 is 28.6049... in binary).
    assert round_half_up(28.605, Decimal("0.01")) == Decimal("28.61")
    assert round_half_up(421.25, Decimal("0.1")) == Decimal("421.3")
    assert round_half_up(421.24, Decimal("0.1")) == Decimal("421.2")
    # An uncertainty is rounded up, never down (GUM, JCGM 100:2008, 7.2.6) ...
    assert round_up(0.31, Decimal("0.1")) == Decimal("0.4")
    assert round_up(0.021, Decimal("0.01")) == Decimal("0.03")
    # ... but float noise is not a reason to: 0.1 + 0.2 is 0.30000000000000004.
    assert round_up(0.1 + 0.2, Decimal("0.1")) == Decimal("0.3")
    q = Quantity.of(421.25, 0.31, Decimal("0.1"))
    assert (q.text, q.u_text, q.value, q.u) == ("421.3", "0.4", 421.3, 0.4)
    assert Quantity.of(29.0, None, Decimal("0.01")).text == "29.00"
    # A damaged record prints as such instead of stopping the report.
    broken = Quantity.of(float("nan"), float("inf"), Decimal("0.1"))
    assert (broken.text, broken.u_text) == ("not a number", None)


def test_bands_print_as_target_and_tolerance() -> None:
    # 31.5 .. 32.5 points is D2 ± 0.5 (domain.md: D0 = 30 points, ten points a letter).
    band = Band.of(31.5, 32.5, Decimal("0.1"), points=True)
    assert band is not None and band.text == "D2.0 ± 0.5" and band.target == 32.0
    weight = Band.of(403.0, 409.0, Decimal("0.1"), points=False)
    assert weight is not None and weight.text == "406.0 ± 3.0"
    low_only = Band.of(400.0, None, Decimal("0.1"), points=False)
    assert low_only is not None and low_only.text == "≥ 400.0" and low_only.target is None
    assert Band.of(None, None, Decimal("0.1"), points=False) is None


def test_swing_weight_of_a_row_follows_the_lorythmic_definition() -> None:
    # domain.md: M14 = W * (BP - 14); points = (M14 [oz*in] - 161) / 1.75; D0 = 30 points.
    # 421.0 g at 28.6 in: 421.0 * 14.6 = 6146.6 g*in = 216.816 oz*in -> 31.895 points = D1.9.
    m = make_measurement(1, total_weight_g=421.0, balance_point_in=28.6)
    points = (421.0 * (28.6 - 14.0) / GRAMS_PER_OUNCE - 161.0) / 1.75
    assert points == pytest.approx(31.895, abs=0.001)
    row = _report([m]).rows[0]
    assert row.swingweight_label == "D1.9"
    assert row.swingweight_points.value == 31.9
    assert row.weight_g.text == "421.0" and row.balance_point_in.text == "28.60"


# ----------------------------------------------------------------------- rows and summary


def test_a_club_measured_again_shows_the_latest_with_its_history() -> None:
    report = _report(larkspur_measurements())
    rows = report.rows
    assert [r.club_id for r in rows] == [
        "LCW-2611-4I", "LCW-2611-5I", "LCW-2611-6I", "LCW-2611-7I", "LCW-2611-8I",
        "LCW-2611-9I", "LCW-2611-PW",
    ]  # fmt: skip
    assert [r.number for r in rows] == list(range(1, 8))
    eight = rows[4]
    # The 8-iron keeps its place in the set; the row is its second measurement (seq 8).
    assert eight.seq == 8 and eight.verdict is Verdict.PASS
    assert [h.seq for h in eight.history] == [5]
    assert eight.history[0].verdict is Verdict.FAIL and eight.history[0].swingweight_label == "D5.3"
    assert all(not r.history for r in rows if r is not eight)
    # Counted on each club's latest measurement: the set as it leaves the bench.
    s = report.summary
    assert (s.clubs, s.measurements, s.remeasured) == (7, 8, 1)
    assert (s.passes, s.near_limit, s.fails, s.no_spec) == (6, 1, 0, 0)


def test_rows_carry_targets_from_the_checks_and_notes_of_failed_checks() -> None:
    report = _report(larkspur_measurements())
    seven = report.rows[3]
    assert seven.swingweight_band is not None and seven.swingweight_band.text == "D2.0 ± 0.5"
    assert seven.weight_band is not None and seven.weight_band.text == "406.0 ± 3.0"
    assert seven.balance_band is None  # the spec sets no balance-point band
    assert seven.weight_g.u_text == "0.3"  # 0.23 g rounded up to the 0.1 g step
    assert seven.balance_point_in.u_text == "0.04"  # 0.031 in rounded up to 0.01 in
    assert seven.swingweight_u_text == "0.3"  # 0.27 point rounded up to 0.1 point
    failed = report.rows[4].history[0]
    assert failed.notes and "swing weight" in failed.notes[0]
    # Each plot marks its own check: the heavy 8-iron failed on swing weight, not on weight.
    assert failed.check_verdict("swingweight") is Verdict.FAIL
    assert failed.check_verdict("total_weight") is Verdict.PASS
    assert failed.check_verdict("balance_point") is Verdict.NO_SPEC
    assert report.rows[6].verdict is Verdict.NEAR_LIMIT and report.rows[6].notes


def test_grouping_keeps_capture_order_and_clubs_without_an_id_apart() -> None:
    a1, b, a2 = (make_measurement(i) for i in (1, 2, 3))
    a2 = a2.model_copy(update={"club_id": a1.club_id})
    anon = [make_measurement(i).model_copy(update={"club_id": None}) for i in (4, 5)]
    shuffled = [a2, anon[1], b, anon[0], a1]  # the store's order need not be the time order
    groups = group_remeasured(shuffled)
    assert [[m.seq for m in g] for g in groups] == [[1, 3], [2], [4], [5]]


def test_times_are_printed_in_the_station_zone() -> None:
    # 12:00 UTC on 1 July is 13:00 in London (BST = UTC+1, IANA tz database).
    m = make_measurement(1, time_utc=datetime(2026, 7, 1, 12, 0, 5, tzinfo=UTC))
    report = _report([m], tz="Europe/London")
    assert report.rows[0].time_text == "2026-07-01 13:00:05"
    assert report.zone == "Europe/London"
    header = dict(report.header)
    assert header["Measured"] == "2026-07-01 13:00 to 13:00 (Europe/London)"
    assert header["Report generated"] == "2026-12-01 09:30:00 (Europe/London) by heft 9.9.9"


def test_header_names_what_is_known_and_omits_what_is_not() -> None:
    report = _report(larkspur_measurements(), selection=["job LCW-2611"])
    header = dict(report.header)
    assert header["Job"] == JOB and header["Station"] == "bench-1"
    assert header["Selection"] == "job LCW-2611"
    assert header["Measured with"] == "heft 0.1.0"
    assert report.title == f"Club measurement report — job {JOB}"
    # No record carries customer, order, set or operator yet: no such line, not an empty one.
    assert not {"Customer", "Order", "Set", "Operator"} & set(header)
    assert all(text.strip() for _, text in report.header)
    assert "k = 2" in report.uncertainty_statement and "JCGM 100:2008" in UNCERTAINTY_STATEMENT


class _LaterMeasurement(Measurement):
    """The record as later work extends it (customer, order): shown when present."""

    customer_ref: str | None = None
    order_ref: str | None = None


def test_optional_header_fields_show_when_records_carry_them() -> None:
    base = larkspur_measurements()[0].model_dump(exclude={"operator"})
    m = _LaterMeasurement(**base, customer_ref="Fairway Fitters", order_ref="PO-7731",
                          operator="mo")  # fmt: skip
    header = dict(_report([m]).header)
    assert header["Customer"] == "Fairway Fitters"
    assert header["Order"] == "PO-7731" and header["Operator"] == "mo"
    assert "Set" not in header


def test_no_measurements_make_no_report() -> None:
    assert build_report([], [], tz=UTC, tz_name="UTC", generated_utc=NOW, generator="x") is None


# --------------------------------------------------------------------- calibration chain


def test_calibration_chain_lists_every_record_the_rows_used() -> None:
    report = _report(larkspur_measurements())
    assert [c.id for c in report.calibrations] == list(CAL_IDS)
    first = report.calibrations[0]
    assert (first.kind, first.channel, first.source) == ("span", "beam/0", "store")
    assert first.reference_text == "500.0 g, class M1, id LCW-REF-500"
    assert first.due_text == "2027-02-08" and first.when_text == "2026-11-10 08:00:00"
    assert first.used_by == 8 and not first.overdue_when_used
    assert first.device_text == "beam-hx711 s/n LCW-B-0007" and first.operator == "mo"


def test_calibration_chain_marks_config_missing_and_overdue_records() -> None:
    overdue = make_calibration("beam/0", "span", T0 - timedelta(days=100)).model_copy(
        update={"id": "old-span", "next_due": date(2026, 11, 29)}  # the day before T0
    )
    unused = make_calibration("beam/1", "zero", T0).model_copy(update={"id": "unused"})
    m = larkspur_record(1, "4-iron", "LCW-2611-4I", 386.4, 29.88, 386.0).model_copy(
        update={"calibration_ids": ["old-span", "config:beam/1", "gone"], "id": uuid.uuid4()}
    )
    report = build_report([m], [overdue, unused], tz=UTC, tz_name="UTC", generated_utc=NOW,
                          generator="x")  # fmt: skip
    assert report is not None
    entries = {c.id: c for c in report.calibrations}
    assert set(entries) == {"old-span", "config:beam/1", "gone"}
    assert entries["old-span"].overdue_when_used
    assert entries["config:beam/1"].source == "config"
    assert entries["config:beam/1"].channel == "beam/1"
    assert entries["gone"].source == "missing"
