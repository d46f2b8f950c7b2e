"""Calibration records: zero, span from a reference mass, verify; due and overdue dates."""

from __future__ import annotations

from datetime import UTC, date, datetime

import pytest

from heft.daemon.calibration import (
    CalibrationError,
    CountsWindow,
    counts_to_g,
    default_verify_tolerance_g,
    due_status,
    span_record,
    usable,
    verify_record,
    zero_record,
)
from heft.daemon.config import ChannelConfig
from heft.daemon.events import AlarmKind
from heft.daemon.records import ReferenceMass

NOW = datetime(2026, 5, 4, 9, 0, tzinfo=UTC)
TRUE_ZERO, TRUE_SPAN = 8453.0, 418.73  # counts, counts per gram (simulated cell)
REF_200 = ReferenceMass(mass_g=200.0, weight_class="M1", weight_id="LCW-REF-200")


def window(load_g: float, spread: float = 30.0) -> CountsWindow:
    base = TRUE_ZERO + TRUE_SPAN * load_g
    return CountsWindow.of(
        [base - spread, base, base + spread, base - spread / 2, base + spread / 2]
    )


def test_zero_then_span_recovers_the_cell() -> None:
    zero = zero_record("bench-1", "beam/0", window(0.0), NOW, None)
    assert zero.kind == "zero" and not usable(zero)  # no span yet: cannot convert alone
    assert zero.zero_counts == pytest.approx(TRUE_ZERO)
    span = span_record("bench-1", "beam/0", zero, window(200.0), REF_200, NOW, 90)
    assert usable(span)
    assert span.counts_per_g == pytest.approx(TRUE_SPAN)
    assert span.reference == REF_200
    assert span.next_due == date(2026, 8, 2)  # 90 days after 4 May
    assert counts_to_g(span, TRUE_ZERO + TRUE_SPAN * 415.0) == pytest.approx(415.0)


def test_span_records_the_as_found_reading() -> None:
    zero = zero_record("bench-1", "beam/0", window(0.0), NOW, None)
    old = span_record("bench-1", "beam/0", zero, window(200.0), REF_200, NOW, 90)
    drifted = old.model_copy(update={"counts_per_g": TRUE_SPAN * 1.01})
    new = span_record("bench-1", "beam/0", zero, window(200.0), REF_200, NOW, 90, drifted)
    assert new.result_g == pytest.approx(200.0 / 1.01)
    assert new.residual_g == pytest.approx(200.0 / 1.01 - 200.0)


def test_span_without_the_mass_on_is_refused() -> None:
    zero = zero_record("bench-1", "beam/0", window(0.0), NOW, None)
    with pytest.raises(CalibrationError, match="is the mass on"):
        span_record("bench-1", "beam/0", zero, window(0.01), REF_200, NOW, 90)


def test_verify_passes_and_fails_on_the_residual() -> None:
    zero = zero_record("bench-1", "beam/0", window(0.0), NOW, None)
    span = span_record("bench-1", "beam/0", zero, window(200.0), REF_200, NOW, 90)
    check = ReferenceMass(mass_g=100.0, weight_class="M1", weight_id="LCW-CHK-100")
    tol = default_verify_tolerance_g(100.0, 0.1)  # max(0.1 % of 100 g, 2 d) = 0.2 g
    assert tol == pytest.approx(0.2)
    ok = verify_record("bench-1", "beam/0", span, window(100.0), check, tol, NOW)
    assert ok.passed and ok.residual_g == pytest.approx(0.0, abs=1e-6)
    bad = verify_record("bench-1", "beam/0", span, window(100.5), check, tol, NOW)
    assert not bad.passed and bad.residual_g == pytest.approx(0.5)


def test_too_few_samples() -> None:
    with pytest.raises(CalibrationError, match="only 2 samples"):
        CountsWindow.of([1.0, 2.0])


def test_due_and_overdue() -> None:
    cfg = ChannelConfig(calibration_warn_days=7)
    zero = zero_record("bench-1", "beam/0", window(0.0), NOW, None)
    span = span_record("bench-1", "beam/0", zero, window(200.0), REF_200, NOW, 90)
    assert due_status("beam/0", span, cfg, date(2026, 7, 1)) is None
    due = due_status("beam/0", span, cfg, date(2026, 7, 27))
    assert due is not None and due.kind is AlarmKind.CALIBRATION_DUE
    over = due_status("beam/0", span, cfg, date(2026, 8, 3))
    assert over is not None and over.kind is AlarmKind.CALIBRATION_OVERDUE
    never = due_status("beam/0", None, cfg, date(2026, 5, 4))
    assert never is not None and never.kind is AlarmKind.CALIBRATION_OVERDUE
    assert due_status("beam/0", None, ChannelConfig(source="config", zero_counts=0, counts_per_g=1),
                      date(2026, 5, 4)) is None
