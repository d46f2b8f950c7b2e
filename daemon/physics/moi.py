"""Moment of inertia about the butt from a pendulum swing (pure; grams, inches, seconds).

A club hung from a pivot p inches from the butt swings as a physical pendulum. With its CG at
d = BP - p below the pivot, the small-swing period T0 gives I_pivot = m*g*d*T0^2 / (4*pi^2)
(textbook physical pendulum). The parallel-axis theorem moves that to the butt:
I_butt = I_pivot - m*d^2 + m*BP^2 = I_pivot + m*p*(2*BP - p).

A swing of amplitude theta0 runs slower than the small-swing period by the exact factor
2*K(sin(theta0/2))/pi (K: complete elliptic integral of the first kind, via the arithmetic-
geometric mean); for small swings that is 1 + theta0^2/16 + ...

The result depends on the local gravitational acceleration (standard gravity by default);
give the local value for better than about 0.3 %.
"""

from __future__ import annotations

import math
from collections.abc import Mapping

from daemon.physics.club import BenchInputs
from daemon.physics.statics import ClubStatics
from daemon.physics.uncertainty import UncertainValue
from daemon.units import g_in2_to_kg_cm2, m_to_in

STANDARD_GRAVITY_M_S2 = 9.80665  # exact by definition (3rd CGPM, 1901)


class PendulumError(ValueError):
    """Pendulum inputs that describe no real swing."""


def _agm(a: float, b: float) -> float:
    while abs(a - b) > 1e-15 * a:
        a, b = (a + b) / 2.0, math.sqrt(a * b)
    return a


def large_swing_factor(amplitude_rad: float) -> float:
    """T / T0 for a swing of amplitude ``amplitude_rad`` (exact; 1 for a vanishing swing)."""
    if not 0.0 <= amplitude_rad < math.pi:
        raise PendulumError(f"swing amplitude must be 0..pi rad, not {amplitude_rad:g}")
    # T/T0 = 2K(k)/pi with k = sin(theta0/2), and K(k) = pi / (2*AGM(1, cos(theta0/2))).
    return 1.0 / _agm(1.0, math.cos(amplitude_rad / 2.0))


def _gravity_in_s2(gravity_m_s2: float) -> float:
    if not 9.7 <= gravity_m_s2 <= 9.9:
        raise PendulumError(
            f"gravity {gravity_m_s2:g} m/s^2 is not an Earth-surface value (about 9.78-9.83)"
        )
    return m_to_in(gravity_m_s2)


def _cg_below_pivot_in(balance_point_in: float, pivot_in: float) -> float:
    d = balance_point_in - pivot_in
    if d <= 0:
        raise PendulumError(
            f"the pivot at {pivot_in:g} in must lie between the butt and the balance point "
            f"({balance_point_in:g} in)"
        )
    return d


def moi_about_pivot_g_in2(
    total_weight_g: float,
    balance_point_in: float,
    pivot_in: float,
    period_s: float,
    *,
    gravity_m_s2: float = STANDARD_GRAVITY_M_S2,
    amplitude_rad: float = 0.0,
) -> float:
    """I about the pivot from the measured period: m*g*d*T0^2 / (4*pi^2), in g*in^2."""
    if period_s <= 0 or total_weight_g <= 0:
        raise PendulumError("period and total weight must be positive")
    d = _cg_below_pivot_in(balance_point_in, pivot_in)
    t0 = period_s / large_swing_factor(amplitude_rad)
    return total_weight_g * _gravity_in_s2(gravity_m_s2) * d * t0**2 / (4.0 * math.pi**2)


def pivot_to_butt_g_in2(
    moi_pivot_g_in2: float, total_weight_g: float, balance_point_in: float, pivot_in: float
) -> float:
    """Parallel axis: I_butt = I_pivot + m*p*(2*BP - p)."""
    return moi_pivot_g_in2 + total_weight_g * pivot_in * (2.0 * balance_point_in - pivot_in)


def moi_about_butt_g_in2(
    total_weight_g: float,
    balance_point_in: float,
    pivot_in: float,
    period_s: float,
    *,
    gravity_m_s2: float = STANDARD_GRAVITY_M_S2,
    amplitude_rad: float = 0.0,
) -> float:
    """MOI about the butt in g*in^2 from a period measured about a pivot ``pivot_in`` from it."""
    i_pivot = moi_about_pivot_g_in2(
        total_weight_g,
        balance_point_in,
        pivot_in,
        period_s,
        gravity_m_s2=gravity_m_s2,
        amplitude_rad=amplitude_rad,
    )
    return pivot_to_butt_g_in2(i_pivot, total_weight_g, balance_point_in, pivot_in)


def moi_about_butt_kg_cm2(
    total_weight_g: float,
    balance_point_in: float,
    pivot_in: float,
    period_s: float,
    *,
    gravity_m_s2: float = STANDARD_GRAVITY_M_S2,
    amplitude_rad: float = 0.0,
) -> float:
    """As :func:`moi_about_butt_g_in2`, in kg*cm^2."""
    return g_in2_to_kg_cm2(
        moi_about_butt_g_in2(
            total_weight_g,
            balance_point_in,
            pivot_in,
            period_s,
            gravity_m_s2=gravity_m_s2,
            amplitude_rad=amplitude_rad,
        )
    )


def period_for_moi_s(
    moi_butt_g_in2: float,
    total_weight_g: float,
    balance_point_in: float,
    pivot_in: float,
    *,
    gravity_m_s2: float = STANDARD_GRAVITY_M_S2,
    amplitude_rad: float = 0.0,
) -> float:
    """The period a club of this MOI about the butt should show about the pivot (the inverse)."""
    d = _cg_below_pivot_in(balance_point_in, pivot_in)
    i_pivot = moi_butt_g_in2 - total_weight_g * pivot_in * (2.0 * balance_point_in - pivot_in)
    if i_pivot < total_weight_g * d * d:
        raise PendulumError(
            "that MOI is smaller than a point mass at the balance point allows; "
            "check the MOI, weight and balance point"
        )
    t0 = 2.0 * math.pi * math.sqrt(i_pivot / (total_weight_g * _gravity_in_s2(gravity_m_s2) * d))
    return t0 * large_swing_factor(amplitude_rad)


def moi_about_butt_numbers(
    bench: BenchInputs,
    pivot_in: UncertainValue,
    period_s: UncertainValue,
    *,
    gravity_m_s2: float = STANDARD_GRAVITY_M_S2,
    amplitude_rad: float = 0.0,
) -> tuple[float, float | None]:
    """MOI about the butt (g*in^2) of the club read by ``bench``, with its expanded uncertainty
    (k = 2) propagated from the bench's inputs, the pivot position and the period (None when no
    input carried one)."""
    extra = {"pivot_in": pivot_in, "period_s": period_s}

    def moi(s: ClubStatics, v: Mapping[str, float]) -> float:
        return moi_about_butt_g_in2(
            s.total_weight_g,
            s.balance_point_in,
            v["pivot_in"],
            v["period_s"],
            gravity_m_s2=gravity_m_s2,
            amplitude_rad=amplitude_rad,
        )

    x = bench.propagate_with(extra, moi)
    return x.value, bench.report_u(x)
