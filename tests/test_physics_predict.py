"""Predicting a club from parts; trimming and length changes; rules of thumb as bands."""

from __future__ import annotations

import dataclasses
import math

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from heft.daemon.physics.predict import (
    BuildError,
    ClubBuild,
    End,
    Part,
    Shaft,
    change_length,
    predict,
    statics_of_parts,
)

# An invented steel-shafted 7-iron for Larkspur Clubworks' bench (demo data, not a check value).
SEVEN_IRON = ClubBuild(
    length_in=37.0,
    head_g=266.0,
    shaft=Shaft(mass_g=120.0, length_in=41.0, balance_point_in=21.0).trimmed(
        tip_in=1.5, butt_in=3.5
    ),
    grip_g=50.0,
)


def _points(build: ClubBuild) -> float:
    return predict(build).swingweight_points


def test_parts_add_by_moments() -> None:
    # W = sum m_i, BP = sum m_i x_i / W (statics)
    parts = [Part("a", 100.0, 2.0), Part("b", 300.0, 36.0)]
    s = statics_of_parts(parts)
    assert s.total_weight_g == 400.0
    assert s.balance_point_in == pytest.approx((200.0 + 10800.0) / 400.0)
    assert s.moment_g_in == pytest.approx(100 * (2 - 14) + 300 * (36 - 14))


def test_shaft_model_reproduces_its_inputs_and_trims_consistently() -> None:
    shaft = Shaft(120.0, 41.0, 19.8)
    whole_mass, whole_moment = shaft.segment(0.0, 41.0)
    assert whole_mass == pytest.approx(120.0)
    assert whole_moment / whole_mass == pytest.approx(19.8)
    cut = shaft.trimmed(tip_in=1.0, butt_in=3.0)
    tip_mass, tip_moment = shaft.segment(40.0, 41.0)
    butt_mass, butt_moment = shaft.segment(0.0, 3.0)
    # The pieces and the rest add back to the whole shaft (mass and first moment).
    assert cut.mass_g + tip_mass + butt_mass == pytest.approx(120.0)
    assert cut.mass_g * (cut.balance_point_in + 3.0) + tip_moment + butt_moment == pytest.approx(
        whole_moment
    )
    # Heavier towards the butt because it balances short of half way.
    assert shaft.density_g_per_in(0.0) > shaft.density_g_per_in(41.0) > 0


def test_shaft_balance_point_must_fit_a_real_shaft() -> None:
    with pytest.raises(BuildError, match="1/3 and 2/3"):
        Shaft(120.0, 41.0, 10.0)
    with pytest.raises(BuildError):
        Shaft(120.0, 41.0, 19.8).trimmed(tip_in=30.0, butt_in=12.0)


def test_a_build_is_the_sum_of_its_parts() -> None:
    # Statics: W = sum of the parts; M14 = sum m_i (x_i - 14) with the head at length - 1 in.
    c = predict(SEVEN_IRON)
    shaft = SEVEN_IRON.shaft
    assert c.total_weight_g == pytest.approx(266.0 + shaft.mass_g + 50.0)
    expected_m = (
        266.0 * (36.0 - 14.0) + shaft.mass_g * (shaft.balance_point_in - 14.0) + 50.0 * (4.5 - 14.0)
    )
    assert c.moment_g_in == pytest.approx(expected_m)
    assert 4.5 < c.balance_point_in < 36.0


def test_shaft_weight_about_nine_to_ten_grams_per_point() -> None:
    # Common practice, no source: 9-10 g of shaft weight = 1 point, depending on the shaft's
    # balance point. Band 8.5 - 11 g for shafts balancing 18.8-19.6 in from the club's butt.
    for shaft_bp in (18.8, 19.2, 19.6):
        base = dataclasses.replace(SEVEN_IRON, shaft=Shaft(110.0, 37.0, shaft_bp))
        heavier = dataclasses.replace(SEVEN_IRON, shaft=Shaft(120.0, 37.0, shaft_bp))
        g_per_point = 10.0 / (_points(heavier) - _points(base))
        assert 8.5 <= g_per_point <= 11.0


@pytest.mark.parametrize("end", [End.TIP, End.BUTT])
def test_half_an_inch_about_three_points(end: End) -> None:
    # Common practice, no source: half an inch of length = about 3 points on irons (derived
    # ~2.7 from the head plus ~0.5 from the shaft). Band 2.4 - 4.0, longer and shorter.
    longer = _points(change_length(SEVEN_IRON, 0.5, end)) - _points(SEVEN_IRON)
    shorter = _points(SEVEN_IRON) - _points(change_length(SEVEN_IRON, -0.5, end))
    assert 2.4 <= longer <= 4.0
    assert 2.4 <= shorter <= 4.0


def test_length_change_moves_head_parts_only() -> None:
    build = dataclasses.replace(
        SEVEN_IRON,
        extras=(Part("tape", 2.0, 36.0, End.TIP), Part("butt weight", 10.0, 1.0, End.BUTT)),
    )
    cut = change_length(build, -0.5, End.BUTT)
    assert cut.length_in == 36.5
    assert cut.extras[0].position_in == 35.5
    assert cut.extras[1].position_in == 1.0
    assert cut.shaft.length_in == pytest.approx(build.shaft.length_in - 0.5)
    longer = change_length(build, 1.0, End.BUTT, extension_g_per_in=4.0)
    assert longer.extras[-1].mass_g == pytest.approx(4.0)
    assert longer.extras[-1].position_in == pytest.approx(0.5)
    assert longer.shaft_butt_in == pytest.approx(1.0)


@settings(deadline=None)  # no timing in unit tests: the CI machine is shared
@given(st.floats(150.0, 350.0), st.floats(0.1, 40.0))
def test_monotonic_in_head_mass(head_g: float, more_g: float) -> None:
    lighter = dataclasses.replace(SEVEN_IRON, head_g=head_g)
    heavier = dataclasses.replace(SEVEN_IRON, head_g=head_g + more_g)
    assert _points(heavier) > _points(lighter)


@settings(deadline=None)  # no timing in unit tests: the CI machine is shared
@given(st.floats(-2.0, 2.0), st.floats(0.05, 1.5), st.sampled_from([End.TIP, End.BUTT]))
def test_monotonic_in_length(delta_in: float, more_in: float, end: End) -> None:
    shorter = change_length(SEVEN_IRON, delta_in, end)
    longer = change_length(SEVEN_IRON, delta_in + more_in, end)
    assert _points(longer) > _points(shorter)


def test_negative_mass_refused() -> None:
    with pytest.raises(BuildError, match="tape"):
        Part("tape", -1.0, 36.0)


@pytest.mark.parametrize("bad", [math.nan, math.inf, -1.0])
def test_non_finite_parts_are_refused_when_the_build_is_made(bad: float) -> None:
    with pytest.raises(BuildError, match="shaft"):
        Shaft(bad, 41.0, 20.0)
    with pytest.raises(BuildError, match="head"):
        dataclasses.replace(SEVEN_IRON, head_g=bad)
    with pytest.raises(BuildError, match="grip"):
        dataclasses.replace(SEVEN_IRON, grip_cg_in=bad if bad != -1.0 else math.nan)


def test_tip_or_butt_cut_of_a_uniform_shaft_leaves_the_same_club() -> None:
    # A uniform shaft (balance point at half its length) cut by c at either end leaves a
    # uniform shaft of L - c seated at the butt, and the head moves c either way (statics), so
    # both cuts must give the same club.
    build = dataclasses.replace(SEVEN_IRON, shaft=Shaft(110.0, 37.0, 18.5))
    tip = predict(change_length(build, -0.5, End.TIP))
    butt = predict(change_length(build, -0.5, End.BUTT))
    assert tip.total_weight_g == pytest.approx(butt.total_weight_g, rel=1e-12)
    assert tip.swingweight_points == pytest.approx(butt.swingweight_points, abs=1e-9)


def test_butt_cut_of_a_butt_heavy_shaft_removes_more() -> None:
    # Density rho(s) = a + b s (s from the shaft's butt), b < 0 for a shaft balancing short of
    # half way. After a cut c the shaft spans 0..L-c either way; a butt cut leaves rho(s + c),
    # lighter by |b| c everywhere, so (calculus) it weighs |b| c (L - c) less and its moment
    # about 14 in is |b| c * integral of (s - 14) over 0..L-c smaller.
    length, cut = 37.0, 0.5
    shaft = Shaft(110.0, length, 17.5)
    # Calculus: the first moment about L/2 of a + b s over 0..L is b L^3 / 12 = m (BP - L/2).
    b = 12.0 * 110.0 * (17.5 - length / 2) / length**3
    build = dataclasses.replace(SEVEN_IRON, shaft=shaft)
    tip = predict(change_length(build, -cut, End.TIP))
    butt = predict(change_length(build, -cut, End.BUTT))
    rest = length - cut
    assert tip.total_weight_g - butt.total_weight_g == pytest.approx(-b * cut * rest, rel=1e-9)
    moment_gap = -b * cut * (rest**2 / 2 - 14.0 * rest)
    assert tip.moment_g_in - butt.moment_g_in == pytest.approx(moment_gap, rel=1e-9)
    assert butt.swingweight_points < tip.swingweight_points
