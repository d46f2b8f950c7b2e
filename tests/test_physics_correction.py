"""Corrections to a target swing weight: exact by moments; the trade's rules of thumb."""

from __future__ import annotations

import pytest
from hypothesis import assume, given, settings
from hypothesis import strategies as st

from heft.daemon.physics.club import weight_and_balance_bench
from heft.daemon.physics.correction import (
    CorrectionError,
    correct_to_target,
    correction_mass_g,
    correction_numbers,
)
from heft.daemon.physics.swingweight import (
    SwingweightRangeError,
    moment_about_g_in,
    points_from_label,
    points_from_moment_g_in,
)
from heft.daemon.physics.uncertainty import UncertainValue as U


def _points(w: float, bp: float) -> float:
    return points_from_moment_g_in(moment_about_g_in(w, bp))


def _points_by_hand(w: float, bp: float) -> float:
    """Points from first principles, none of the module's constants: M14 = W*(BP - 14) in g*in,
    1 oz = 28.349523125 g (exact, 1959), A0 = 161 oz*in and 1.75 oz*in per point (trade tables,
    japanese.yujigolf.com/2012/01/blog-post_10.html)."""
    return (w * (bp - 14.0) / 28.349523125 - 161.0) / 1.75


@settings(deadline=None)  # no timing in unit tests: the CI machine is shared
@given(
    st.floats(250.0, 550.0),
    st.floats(24.0, 36.0),
    st.floats(0.0, 70.0),
    st.one_of(st.floats(0.0, 12.0), st.floats(20.0, 46.0)),
)
def test_corrections_land_exactly_on_target(w: float, bp: float, target: float, x: float) -> None:
    # Moments add (statics), so re-computing the corrected club - by hand, not through the code
    # that made the correction - must give the target exactly.
    try:
        c = correct_to_target(w, bp, target, x)
    except CorrectionError:
        assume(False)
        return
    assert _points_by_hand(
        c.corrected_total_weight_g, c.corrected_balance_point_in
    ) == pytest.approx(target, abs=1e-7)
    assert c.corrected_total_weight_g == pytest.approx(w + c.mass_g)
    assert c.corrected_balance_point_in == pytest.approx((w * bp + c.mass_g * x) / (w + c.mass_g))


def test_formula_as_written() -> None:
    # dm = (P_target - P_now) * 49.61 / (x - 14) (domain notes, derived)
    assert correction_mass_g(30.0, 32.0, 37.0) == pytest.approx(2 * 49.61 / 23, abs=1e-3)
    assert correction_mass_g(32.0, 30.0, 37.0) < 0  # remove


def test_head_weight_about_two_grams_per_point_on_an_iron() -> None:
    # Common practice, no source: about 2 g of head weight (or lead tape) per point on an iron
    # (derived 2.2 g at 37 in). Band 1.8 - 2.5 g for a head CG between 35 and 38 in.
    for x in (35.0, 36.5, 38.0):
        dm = correct_to_target(420.0, 29.0, _points(420.0, 29.0) + 1.0, x).mass_g
        assert 1.8 <= dm <= 2.5


def test_butt_weight_about_3_8_grams_per_point_down() -> None:
    # A butt counterweight near x = 1 in: about 3.8 g per point down (domain notes, derived).
    dm = correct_to_target(420.0, 29.0, _points(420.0, 29.0) - 1.0, 1.0).mass_g
    assert dm == pytest.approx(3.8, abs=0.05)


def test_grip_weight_about_five_grams_per_point() -> None:
    # Common practice, no source: about 5 g of grip weight per point, the other way (grip CG
    # 4-5 in from the butt). Band 4 - 6.5 g.
    for grip_cg in (4.0, 4.5, 5.0):
        dm = correct_to_target(420.0, 29.0, _points(420.0, 29.0) - 1.0, grip_cg).mass_g
        assert 4.0 <= dm <= 6.5


def test_mass_at_the_fulcrum_cannot_correct() -> None:
    with pytest.raises(CorrectionError, match="fulcrum"):
        correct_to_target(420.0, 29.0, 32.0, 14.0)


def test_cannot_remove_more_than_the_club() -> None:
    with pytest.raises(CorrectionError, match="remove"):
        correct_to_target(300.0, 30.0, 0.0, 14.5)


def test_off_scale_target_refused() -> None:
    with pytest.raises(SwingweightRangeError):
        correct_to_target(420.0, 29.0, 75.0, 37.0)


def test_correction_uncertainty_follows_the_readings() -> None:
    exact = correction_numbers(weight_and_balance_bench(U(420.0), U(29.0)), 32.0, U(36.0))
    assert exact.mass_g_u is None
    bench = weight_and_balance_bench(U(420.0, 0.05), U(29.0, 0.05))
    with_u = correction_numbers(bench, points_from_label("D2"), U(36.0))
    assert with_u.correction == exact.correction
    # Only the club's own moment is uncertain here: u(dm) = u(M14)/(x - 14) (GUM eq. 10).
    u_m14 = (15.0**2 * 0.05**2 + 420.0**2 * 0.05**2) ** 0.5
    assert with_u.mass_g_u == pytest.approx(2 * u_m14 / 22.0, rel=1e-4)


def test_a_reading_used_twice_is_propagated_from_the_raw_inputs() -> None:
    # W' = W + dm(W, BP) uses W twice, so u(W') is NOT sqrt(u(W)^2 + u(dm)^2). From the raw
    # inputs (GUM eq. 10), with dm = (M_t - W*(BP - 14))/(x - 14) (domain notes, by moments):
    # dW'/dW = 1 - (BP - 14)/(x - 14), dW'/dBP = -W/(x - 14).
    w, u_w, bp, u_bp, x = 420.0, 0.5, 29.0, 0.01, 36.0
    bench = weight_and_balance_bench(U(w, u_w), U(bp, u_bp))
    numbers = correction_numbers(bench, points_from_label("D2"), U(x))
    c_w, c_bp = 1 - (bp - 14) / (x - 14), -w / (x - 14)
    u_correlated = ((c_w * u_w) ** 2 + (c_bp * u_bp) ** 2) ** 0.5
    assert numbers.corrected_total_weight_g_u == pytest.approx(2 * u_correlated, rel=1e-5)
    # Combining the derived u's as if independent would more than double it here (0.63 g
    # against 0.25 g, by the formulas above).
    assert numbers.mass_g_u is not None
    u_naive = (u_w**2 + (numbers.mass_g_u / 2) ** 2) ** 0.5
    assert u_naive > 2 * u_correlated
