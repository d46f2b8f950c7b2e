"""Bench statics: two supports and the fulcrum lever, with their sensitivities."""

from __future__ import annotations

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from heft.daemon.physics.club import club_from_lever, club_from_two_supports
from heft.daemon.physics.statics import (
    StaticsError,
    balance_point_from_moment_in,
    lever_statics,
    two_support_statics,
)
from heft.daemon.physics.uncertainty import UncertainValue as U

# One point = 1.75 oz*in (trade tables: C0 = 196, C8 = 210 in*oz,
# japanese.yujigolf.com/2012/01/blog-post_10.html); 1 oz = 28.349523125 g (exact, 1959).
G_IN_PER_POINT_PUBLISHED = 1.75 * 28.349523125
A0_G_IN_PUBLISHED = 161.0 * 28.349523125  # A0 = 161 oz*in, same tables


def test_two_supports_by_hand() -> None:
    # Sum of forces and of moments (statics): W = 75 + 315, W*BP = 75*4 + 315*36.
    s = two_support_statics(75.0, 4.0, 315.0, 36.0)
    assert s.total_weight_g == 390.0
    assert s.balance_point_in == pytest.approx((75 * 4 + 315 * 36) / 390)
    assert s.moment_g_in == pytest.approx(75 * (4 - 14) + 315 * (36 - 14))
    assert s.moment_g_in == pytest.approx(390 * (s.balance_point_in - 14))


@settings(deadline=None)  # no timing in unit tests: the CI machine is shared
@given(
    st.floats(1.0, 400.0),
    st.floats(0.0, 20.0),
    st.floats(1.0, 400.0),
    st.floats(25.0, 45.0),
    st.floats(-30.0, 30.0),
)
def test_two_supports_independent_of_origin(
    fa: float, xa: float, fb: float, xb: float, shift: float
) -> None:
    # Measuring every position from another origin (fulcrum included) moves BP by the shift
    # and leaves W and the moment unchanged (statics: moments about a fixed physical point).
    s = two_support_statics(fa, xa, fb, xb, 14.0)
    t = two_support_statics(fa, xa + shift, fb, xb + shift, 14.0 + shift)
    assert t.total_weight_g == pytest.approx(s.total_weight_g)
    assert t.moment_g_in == pytest.approx(s.moment_g_in, abs=1e-6 * (1 + abs(s.moment_g_in)))
    assert t.balance_point_in == pytest.approx(s.balance_point_in + shift, abs=1e-9)


# Sensitivities for a 390 g club on supports at 4 and 36 in (domain notes, derived).
def _club(**u: float) -> float:
    c = club_from_two_supports(
        U(75.0, u.get("fa", 0.0)),
        U(4.0, u.get("xa", 0.0)),
        U(315.0, u.get("fb", 0.0)),
        U(36.0, u.get("xb", 0.0)),
    )
    assert c.swingweight_points_u is not None
    return c.swingweight_points_u / 2.0  # back to one standard uncertainty


def test_one_gram_on_the_head_side_is_0_44_point() -> None:
    assert _club(fb=1.0) == pytest.approx(0.44, abs=0.005)


def test_one_mm_of_head_side_support_is_0_25_point() -> None:
    assert _club(xb=1 / 25.4) == pytest.approx(0.25, abs=0.005)


def test_one_mm_slide_against_the_butt_stop_is_0_31_point() -> None:
    # A slide moves the club against both supports at once: shift both positions by 1 mm.
    base = club_from_two_supports(U(75.0), U(4.0), U(315.0), U(36.0))
    slid = club_from_two_supports(U(75.0), U(4.0 + 1 / 25.4), U(315.0), U(36.0 + 1 / 25.4))
    assert slid.swingweight_points - base.swingweight_points == pytest.approx(0.31, abs=0.005)


def test_lever_beam_reads_about_ten_grams_per_point_at_five_inches() -> None:
    # A readout 5.00 in from the pivot reads about 10 g per point
    # (tutelman.com/golf/measure/digitalModSwingweightScale.php; derived 49.61/5).
    d0 = lever_statics(1210.0, 5.0, 420.0)
    d1 = lever_statics(1210.0 + 10.0, 5.0, 420.0)
    points = (d1.moment_g_in - d0.moment_g_in) / G_IN_PER_POINT_PUBLISHED
    assert points == pytest.approx(1.0, abs=0.01)


def test_lever_with_weight_gives_balance_point() -> None:
    c = club_from_lever(U(1210.0), U(5.0), U(420.0))
    # Lever statics: M = F*r = 1210 g * 5 in; BP = 14 + M/W (domain notes, method 2).
    assert c.moment_g_in == pytest.approx(6050.0)
    assert c.balance_point_in == pytest.approx(14.0 + 6050.0 / 420.0)
    assert c.swingweight_points == pytest.approx(
        (6050.0 - A0_G_IN_PUBLISHED) / G_IN_PER_POINT_PUBLISHED
    )


def test_impossible_readings_are_named() -> None:
    with pytest.raises(StaticsError, match="different positions"):
        two_support_statics(100.0, 10.0, 100.0, 10.0)
    with pytest.raises(StaticsError, match="more than 0 g"):
        two_support_statics(-100.0, 4.0, 50.0, 36.0)
    with pytest.raises(StaticsError, match="lever arm"):
        lever_statics(100.0, 0.0, 400.0)
    with pytest.raises(StaticsError, match="total weight"):
        balance_point_from_moment_in(100.0, 0.0)


def test_butt_gap_is_one_shared_error_not_two_independent_ones() -> None:
    # A 1 mm slide against the butt stop moves the swing weight 0.31 point on a 390 g club on
    # supports at 4 and 36 in (domain notes, derived). Propagated as the one shared input it is
    # (GUM eq. 10), a 1 mm butt-gap u gives that; two independent 1 mm position errors give
    # 0.26 point instead (root sum of squares of the two slopes).
    c = club_from_two_supports(U(75.0), U(4.0), U(315.0), U(36.0), butt_gap_in=U(0.0, 1 / 25.4))
    assert c.swingweight_points_u is not None
    assert c.swingweight_points_u / 2 == pytest.approx(0.31, abs=0.005)
    independent = _club(xa=1 / 25.4, xb=1 / 25.4)
    assert independent != pytest.approx(0.31, abs=0.02)


def test_butt_gap_on_the_lever_beam_costs_w_times_the_gap() -> None:
    # Club sitting g short of the stop: its moment about its own 14-in point is F*r - W*g
    # (statics), so u(M) = W * u(g) and u(points) = W * u(g) / (1.75 oz*in), trade tables.
    c = club_from_lever(U(1210.0), U(5.0), U(420.0), butt_gap_in=U(0.0, 0.02))
    assert c.moment_g_in_u == pytest.approx(2 * 420.0 * 0.02)
    assert c.swingweight_points_u == pytest.approx(2 * 420.0 * 0.02 / G_IN_PER_POINT_PUBLISHED)
    shifted = lever_statics(1210.0, 5.0, 420.0, butt_gap_in=0.1)
    assert shifted.moment_g_in == pytest.approx(6050.0 - 42.0)
