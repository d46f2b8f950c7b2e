"""I-MR chart limits by hand arithmetic from the formulas, with the table constants named.

Formulas: Montgomery, Introduction to Statistical Quality Control, the control chart for
individual measurements; constants for n = 2 from the standard factor table (ASTM MNL 7A,
Part 3; Montgomery Appendix Table VI, from memory): d2 = 1.128, D3 = 0, D4 = 3.267.
"""

from __future__ import annotations

import pytest

from heft.daemon.quality.imr import ImrLimits, imr_chart, moving_ranges
from heft.daemon.quality.inputs import QualityInputError

BASELINE = (10.0, 12.0, 11.0, 15.0, 13.0)
# Moving ranges 2, 1, 4, 2: MR-bar = 9 / 4 = 2.25. Mean 61 / 5 = 12.2.
# sigma = 2.25 / 1.128 = 1.994681; limits 12.2 +- 3 x 1.994681 = 12.2 +- 5.984043.
# MR chart: UCL = 3.267 x 2.25 = 7.35075, LCL = 0.


def test_limits_from_a_baseline_by_hand() -> None:
    assert moving_ranges(BASELINE) == (2.0, 1.0, 4.0, 2.0)
    limits = ImrLimits.from_baseline(BASELINE)
    assert limits.centre == pytest.approx(12.2)
    assert limits.sigma == pytest.approx(2.25 / 1.128)
    assert limits.ucl == pytest.approx(18.184043, abs=1e-6)
    assert limits.lcl == pytest.approx(6.215957, abs=1e-6)
    assert limits.mr_centre == pytest.approx(2.25)
    assert limits.mr_ucl == pytest.approx(7.35075)
    assert limits.mr_lcl == 0.0


def test_baseline_with_a_known_centre_keeps_the_centre() -> None:
    limits = ImrLimits.from_baseline(BASELINE, centre=12.0)
    assert limits.centre == 12.0 and limits.ucl == pytest.approx(12.0 + 3 * 2.25 / 1.128)


def test_given_limits_and_points_beyond_them() -> None:
    limits = ImrLimits.given(0.0, 1.0)  # MR-bar implied 1.128, MR UCL 3.267 x 1.128 = 3.685176
    assert limits.mr_ucl == pytest.approx(3.685176)
    chart = imr_chart([0.0, -2.0, 2.0, 3.0, 3.01, -3.2], limits)
    assert chart.beyond_limits == (4, 5)  # 3.0 sits on the UCL: not beyond
    assert chart.moving_ranges == pytest.approx((2.0, 4.0, 1.0, 0.01, 6.21))
    assert chart.mr_beyond_limit == (2, 5)


def test_phase_one_chart_uses_its_own_values() -> None:
    chart = imr_chart(BASELINE)
    assert chart.limits == ImrLimits.from_baseline(BASELINE)
    assert chart.beyond_limits == ()


@pytest.mark.parametrize(
    ("call", "message"),
    [
        (lambda: ImrLimits.from_baseline([5.0, 5.0, 5.0]), "all values equal"),
        (lambda: ImrLimits.from_baseline([5.0]), "at least 2"),
        (lambda: ImrLimits.given(0.0, 0.0), "sigma"),
        (lambda: ImrLimits.given(float("inf"), 1.0), "centre"),
        (lambda: imr_chart([1.0, float("nan")]), r"values\[1\]"),
        (lambda: imr_chart([1.0, "2"]), r"values\[1\]: expected a number"),  # type: ignore[list-item]
    ],
)
def test_bad_input_is_refused(call: object, message: str) -> None:
    with pytest.raises(QualityInputError, match=message):
        call()  # type: ignore[operator]
