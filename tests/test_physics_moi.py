"""MOI about the butt from a pendulum: textbook rod cases, parallel axis, large swings."""

from __future__ import annotations

import math

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from heft.daemon.physics.club import weight_and_balance_bench
from heft.daemon.physics.moi import (
    STANDARD_GRAVITY_M_S2,
    Pendulum,
    PendulumError,
    large_swing_factor,
    moi_about_butt_numbers,
)
from heft.daemon.physics.uncertainty import UncertainValue as U

G_IN_S2 = STANDARD_GRAVITY_M_S2 / 0.0254  # 9.80665 m/s^2 exactly (3rd CGPM, 1901)


def _rod_period_about(pivot_in: float, mass_g: float, length_in: float) -> float:
    """Small-swing period of a uniform rod about a point ``pivot_in`` from one end.

    Textbook physical pendulum (phys.libretexts.org, physical pendulum): I_cm = m L^2/12,
    I_p = I_cm + m d^2 (parallel axis), T = 2 pi sqrt(I_p / (m g d)).
    """
    d = length_in / 2 - pivot_in
    i_p = mass_g * length_in**2 / 12 + mass_g * d * d
    return 2 * math.pi * math.sqrt(i_p / (mass_g * G_IN_S2 * d))


def test_uniform_rod_about_its_end() -> None:
    # I = m L^2 / 3 and T = 2 pi sqrt(2 L / (3 g)) for a rod swung from its end (textbook).
    m, length = 400.0, 44.0
    period = 2 * math.pi * math.sqrt(2 * length / (3 * G_IN_S2))
    assert _rod_period_about(0.0, m, length) == pytest.approx(period)
    rod = Pendulum(m, length / 2, 0.0)
    assert rod.moi_about_pivot_g_in2(period) == pytest.approx(m * length**2 / 3)
    assert rod.moi_about_butt_g_in2(period) == pytest.approx(m * length**2 / 3)


@pytest.mark.parametrize("pivot_in", [0.5, 1.0, 2.0, 4.0])
def test_rod_about_a_pivot_near_the_butt_recovers_the_end_moi(pivot_in: float) -> None:
    # Parallel-axis theorem (textbook): whatever the pivot, the MOI about the end is m L^2/3.
    m, length = 400.0, 44.0
    period = _rod_period_about(pivot_in, m, length)
    assert Pendulum(m, length / 2, pivot_in).moi_about_butt_g_in2(period) == pytest.approx(
        m * length**2 / 3, rel=1e-12
    )


def test_large_swing_factor() -> None:
    # T = T0 (1 + theta0^2/16) for moderate swings (phys.libretexts.org, pendulum chapters).
    for degrees in (2.0, 5.0, 10.0):
        theta = math.radians(degrees)
        assert large_swing_factor(theta) == pytest.approx(1 + theta**2 / 16, rel=1e-4)
    # From memory: the next series term is 11 theta^4 / 3072; at 90 deg T/T0 = 1.18034.
    theta = math.radians(30.0)
    assert large_swing_factor(theta) == pytest.approx(
        1 + theta**2 / 16 + 11 * theta**4 / 3072, rel=1e-4
    )
    assert large_swing_factor(math.pi / 2) == pytest.approx(1.18034, abs=1e-5)
    assert large_swing_factor(0.0) == 1.0


def test_amplitude_correction_removes_the_slow_down() -> None:
    m, length, pivot = 400.0, 44.0, 1.0
    t0 = _rod_period_about(pivot, m, length)
    theta = math.radians(15.0)
    seen = t0 * large_swing_factor(theta)
    swinging = Pendulum(m, 22.0, pivot, amplitude_rad=theta)
    assert swinging.moi_about_butt_g_in2(seen) == pytest.approx(m * length**2 / 3)
    # Ignoring the amplitude overstates the MOI.
    assert Pendulum(m, 22.0, pivot).moi_about_butt_g_in2(seen) > m * length**2 / 3


@settings(deadline=None)  # no timing in unit tests: the CI machine is shared
@given(st.floats(2300.0, 3500.0), st.floats(0.5, 3.0), st.floats(-15.0, 15.0))
def test_period_for_moi_is_the_inverse(moi_kg_cm2: float, pivot_in: float, deg: float) -> None:
    w, bp = 420.0, 29.0
    moi_g_in2 = moi_kg_cm2 * 1000.0 / 2.54**2
    pendulum = Pendulum(w, bp, pivot_in, amplitude_rad=math.radians(abs(deg)))
    t = pendulum.period_for_moi_s(moi_g_in2)
    back = pendulum.moi_about_butt_kg_cm2(t)
    assert back == pytest.approx(moi_kg_cm2, rel=1e-9)


def test_local_gravity_matters() -> None:
    # The pendulum scales with g: a 0.5 % higher g gives a 0.5 % higher MOI about the pivot.
    # 1.85 s: about what an iron near 2,700 kg*cm^2 about the butt shows from a 1 in pivot.
    a = Pendulum(420.0, 29.0, 1.0, gravity_m_s2=9.78).moi_about_pivot_g_in2(1.85)
    b = Pendulum(420.0, 29.0, 1.0, gravity_m_s2=9.78 * 1.005).moi_about_pivot_g_in2(1.85)
    assert b / a == pytest.approx(1.005)


def test_bad_pendulum_inputs() -> None:
    with pytest.raises(PendulumError, match="pivot"):
        Pendulum(420.0, 29.0, 30.0)
    with pytest.raises(PendulumError, match="gravity"):
        Pendulum(420.0, 29.0, 1.0, gravity_m_s2=32.2)
    with pytest.raises(PendulumError, match="amplitude"):
        Pendulum(420.0, 29.0, 1.0, amplitude_rad=math.nan)
    with pytest.raises(PendulumError, match="weight"):
        Pendulum(0.0, 29.0, 1.0)
    with pytest.raises(PendulumError, match="period"):
        Pendulum(420.0, 29.0, 1.0).moi_about_butt_g_in2(-1.6)
    # I_butt >= m BP^2 since I about the CG cannot be negative (parallel axis): 420 g at
    # 29 in needs at least 353,220 g*in^2 (2279 kg*cm^2).
    with pytest.raises(PendulumError, match="point mass"):
        Pendulum(420.0, 29.0, 1.0).period_for_moi_s(2000.0 * 1000.0 / 2.54**2)


def test_moi_uncertainty_from_the_period() -> None:
    # I_pivot is proportional to T^2: u(I_pivot)/I_pivot = 2 u(T)/T (GUM eq. 12).
    bench = weight_and_balance_bench(U(420.0), U(29.0))
    _value, u = moi_about_butt_numbers(bench, U(1.0), U(1.85, 0.001))
    # I_pivot = m g d T^2 / (4 pi^2), d = 29 - 1 in (textbook physical pendulum).
    i_pivot = 420.0 * G_IN_S2 * 28.0 * 1.85**2 / (4 * math.pi**2)
    assert u == pytest.approx(2 * (2 * 0.001 / 1.85) * i_pivot, rel=1e-5)
    assert moi_about_butt_numbers(bench, U(1.0), U(1.85))[1] is None


def test_a_period_shorter_than_a_point_mass_at_the_cg_is_refused() -> None:
    # No body swings faster than a simple pendulum of length d = BP - pivot, since
    # I_pivot = I_cg + m d^2 >= m d^2 (textbook physical pendulum + parallel axis):
    # T_min = 2 pi sqrt(d / g). 412 g, BP 29.1 in, pivot 1 in: d = 28.1 in = 0.71374 m,
    # T_min = 2 pi sqrt(0.71374 / 9.80665) = 1.6951 s (worked by hand from the formula).
    pendulum = Pendulum(412.0, 29.1, 1.0)
    assert pendulum.shortest_period_s == pytest.approx(1.6951, abs=5e-4)
    with pytest.raises(PendulumError, match="shorter than any club"):
        pendulum.moi_about_butt_g_in2(1.0)
    # Just above the bound is a (very concentrated) club, and its MOI is about m*BP^2.
    i_butt = pendulum.moi_about_butt_g_in2(pendulum.shortest_period_s * (1 + 1e-9))
    assert i_butt == pytest.approx(412.0 * 29.1**2, rel=1e-6)
