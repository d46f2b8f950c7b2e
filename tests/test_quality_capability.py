"""Capability indices by hand arithmetic, their intervals against scipy.stats, and properties.

Formulas: Montgomery, Introduction to Statistical Quality Control, process capability ratios;
Cp interval from the chi-square distribution (same chapter); Cpk interval: Bissell, Applied
Statistics 39(3), 1990, pp. 331-340 (normal approximation).
"""

from __future__ import annotations

import math

import pytest
from hypothesis import assume, given, settings
from hypothesis import strategies as st
from scipy import stats

from heft.daemon.quality.capability import capability
from heft.daemon.quality.inputs import QualityInputError

VALUES = (9.0, 10.0, 11.0, 10.0)  # mean 10, s = sqrt(2 / 3) = 0.816497; MR 1, 1, 1


def test_centred_tolerance_by_hand() -> None:
    result = capability(VALUES, 7.0, 13.0)
    s = math.sqrt(2.0 / 3.0)
    assert result.mean == 10.0 and result.sigma == pytest.approx(s)
    assert result.cp == pytest.approx(6.0 / (6 * s))  # 1.224745
    assert result.cp == pytest.approx(1.224745, abs=1e-6)
    assert result.cpu == pytest.approx(result.cp) and result.cpl == pytest.approx(result.cp)
    assert result.cpk == pytest.approx(result.cp)


def test_off_centre_tolerance_by_hand() -> None:
    result = capability(VALUES, 8.0, 13.0)
    s = math.sqrt(2.0 / 3.0)
    assert result.cp == pytest.approx(5.0 / (6 * s))  # 1.020621
    assert result.cpu == pytest.approx(3.0 / (3 * s))  # 1.224745
    assert result.cpl == pytest.approx(2.0 / (3 * s))  # 0.816497
    assert result.cpk == result.cpl


def test_within_sigma_from_the_moving_range() -> None:
    result = capability(VALUES, 7.0, 13.0, sigma_basis="within")
    assert result.sigma == pytest.approx(1.0 / 1.128)  # MR-bar / d2, d2 = 1.128 (n = 2)
    assert result.cp == pytest.approx(6.0 / (6 / 1.128))  # = 1.128
    assert result.cp_interval is None and result.cpk_interval is None


@pytest.mark.parametrize("confidence", [0.90, 0.95, 0.99])
def test_cp_interval_against_scipy_chi2(confidence: float) -> None:
    values = [10.0 + 0.1 * math.sin(i * 1.7) for i in range(30)]
    result = capability(values, 9.5, 10.5, confidence=confidence)
    alpha, df = 1 - confidence, len(values) - 1
    interval = result.cp_interval
    assert interval is not None and interval.confidence == confidence
    assert interval.low == pytest.approx(
        result.cp * math.sqrt(stats.chi2.ppf(alpha / 2, df) / df), rel=1e-9
    )
    assert interval.high == pytest.approx(
        result.cp * math.sqrt(stats.chi2.ppf(1 - alpha / 2, df) / df), rel=1e-9
    )


def test_cpk_interval_is_bissells() -> None:
    values = [10.0 + 0.1 * math.sin(i * 1.7) for i in range(30)]
    result = capability(values, 9.6, 10.5)
    n, cpk = 30, result.cpk
    half = stats.norm.ppf(0.975) * math.sqrt(1 / (9 * n) + cpk**2 / (2 * (n - 1)))
    interval = result.cpk_interval
    assert interval is not None
    assert (interval.low, interval.high) == pytest.approx((cpk - half, cpk + half), rel=1e-9)


SAMPLES = st.lists(st.floats(-50, 50, allow_nan=False), min_size=2, max_size=40)


@settings(max_examples=200, deadline=None)
@given(values=SAMPLES, lsl=st.floats(-100, 0), width=st.floats(1, 200))
def test_cpk_never_exceeds_cp(values: list[float], lsl: float, width: float) -> None:
    assume(max(values) - min(values) > 1e-6)
    for basis in ("overall", "within"):
        result = capability(values, lsl, lsl + width, sigma_basis=basis)  # type: ignore[arg-type]
        assert result.cpk <= result.cp * (1 + 1e-12)


@settings(max_examples=200, deadline=None)
@given(half=st.lists(st.floats(-20, 20, allow_nan=False), min_size=1, max_size=20),
       middle=st.floats(-100, 100), width=st.floats(1, 100))  # fmt: skip
def test_symmetric_data_centred_in_the_tolerance_gives_cpk_equal_cp(
    half: list[float], middle: float, width: float
) -> None:
    assume(max(half) - min(half) > 1e-3 or any(abs(v) > 1e-3 for v in half))
    values = [middle + v for v in half] + [middle - v for v in half]
    result = capability(values, middle - width / 2, middle + width / 2)
    assert result.cpk == pytest.approx(result.cp, rel=1e-9)


@pytest.mark.parametrize(
    ("kwargs", "message"),
    [
        ({"values": VALUES, "lsl": 13.0, "usl": 7.0}, "usl: must be above lsl"),
        ({"values": [5.0, 5.0, 5.0], "lsl": 1.0, "usl": 9.0}, "all equal"),
        ({"values": [5.0], "lsl": 1.0, "usl": 9.0}, "at least 2"),
        ({"values": VALUES, "lsl": 7.0, "usl": 13.0, "confidence": 1.0}, "confidence"),
        ({"values": VALUES, "lsl": 7.0, "usl": 13.0, "sigma_basis": "short"}, "sigma_basis"),
    ],
)
def test_bad_input_is_refused(kwargs: dict[str, object], message: str) -> None:
    with pytest.raises(QualityInputError, match=message):
        capability(**kwargs)  # type: ignore[arg-type]
