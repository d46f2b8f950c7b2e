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
from dataclasses import dataclass

from heft.daemon.physics.club import BenchInputs
from heft.daemon.physics.statics import ClubStatics
from heft.daemon.physics.uncertainty import UncertainValue
from heft.drivers.units import STANDARD_GRAVITY_M_S2, g_in2_to_kg_cm2, m_to_in


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


@dataclass(frozen=True)
class Pendulum:
    """A club hung from a pivot ``pivot_in`` from the butt: everything but the period.

    Checked on creation (PendulumError): a positive weight, the pivot between the butt and the
    balance point, an Earth-surface gravity and an amplitude of 0..pi.
    """

    total_weight_g: float
    balance_point_in: float
    pivot_in: float
    gravity_m_s2: float = STANDARD_GRAVITY_M_S2
    amplitude_rad: float = 0.0

    def __post_init__(self) -> None:
        if not self.total_weight_g > 0:
            raise PendulumError(f"total weight must be positive, not {self.total_weight_g:g} g")
        if not self.balance_point_in - self.pivot_in > 0:
            raise PendulumError(
                f"the pivot at {self.pivot_in:g} in must lie between the butt and the balance "
                f"point ({self.balance_point_in:g} in)"
            )
        if not 9.7 <= self.gravity_m_s2 <= 9.9:
            raise PendulumError(
                f"gravity {self.gravity_m_s2:g} m/s^2 is not an Earth-surface value "
                "(about 9.78-9.83)"
            )
        large_swing_factor(self.amplitude_rad)  # checks the amplitude

    @property
    def cg_below_pivot_in(self) -> float:
        return self.balance_point_in - self.pivot_in

    @property
    def _stiffness_g_in2_s2(self) -> float:
        """m*g*d: the restoring moment per radian, so I_pivot = m*g*d * T0^2 / (4*pi^2)."""
        return self.total_weight_g * m_to_in(self.gravity_m_s2) * self.cg_below_pivot_in

    @property
    def _butt_minus_pivot_g_in2(self) -> float:
        """Parallel axis: I_butt - I_pivot = m*p*(2*BP - p)."""
        p = self.pivot_in
        return self.total_weight_g * p * (2.0 * self.balance_point_in - p)

    def moi_about_pivot_g_in2(self, period_s: float) -> float:
        """I about the pivot from the measured period (amplitude corrected), in g*in^2."""
        if not period_s > 0:
            raise PendulumError(f"the period must be positive, not {period_s:g} s")
        if period_s < self.shortest_period_s:
            # I_pivot = I_cg + m*d^2 >= m*d^2: no body swings faster than a point mass at its CG.
            raise PendulumError(
                f"a period of {period_s:g} s is shorter than any club of this weight and balance "
                f"point can swing about a pivot at {self.pivot_in:g} in (at least "
                f"{self.shortest_period_s:.3f} s); check the period and the pivot"
            )
        t0 = period_s / large_swing_factor(self.amplitude_rad)
        return self._stiffness_g_in2_s2 * t0**2 / (4.0 * math.pi**2)

    @property
    def shortest_period_s(self) -> float:
        """The period of a point mass at the balance point: the lower bound for any real club."""
        d = self.cg_below_pivot_in
        t0 = 2.0 * math.pi * math.sqrt(d / m_to_in(self.gravity_m_s2))
        return t0 * large_swing_factor(self.amplitude_rad)

    def moi_about_butt_g_in2(self, period_s: float) -> float:
        """MOI about the butt in g*in^2 from the period measured about the pivot."""
        return self.moi_about_pivot_g_in2(period_s) + self._butt_minus_pivot_g_in2

    def moi_about_butt_kg_cm2(self, period_s: float) -> float:
        """As :meth:`moi_about_butt_g_in2`, in kg*cm^2."""
        return g_in2_to_kg_cm2(self.moi_about_butt_g_in2(period_s))

    def period_for_moi_s(self, moi_butt_g_in2: float) -> float:
        """The period a club of this MOI about the butt should show about the pivot."""
        i_pivot = moi_butt_g_in2 - self._butt_minus_pivot_g_in2
        d = self.cg_below_pivot_in
        if i_pivot < self.total_weight_g * d * d:
            raise PendulumError(
                "that MOI is smaller than a point mass at the balance point allows; "
                "check the MOI, weight and balance point"
            )
        t0 = 2.0 * math.pi * math.sqrt(i_pivot / self._stiffness_g_in2_s2)
        return t0 * large_swing_factor(self.amplitude_rad)


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
        pendulum = Pendulum(
            s.total_weight_g, s.balance_point_in, v["pivot_in"], gravity_m_s2, amplitude_rad
        )
        return pendulum.moi_about_butt_g_in2(v["period_s"])

    x = bench.propagate_with(extra, moi)
    return x.value, bench.report_u(x)
