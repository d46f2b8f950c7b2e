"""Grams to add or remove at a position to reach a target swing weight (pure, exact by moments).

Adding dm grams at x inches from the butt changes the moment about the 14-inch fulcrum by
dm*(x - 14), so dm = (P_target - P_now) * 49.61 / (x - 14) exactly (49.61 g*in = one point).
Positive dm adds mass, negative removes it. New W' = W + dm and BP' = (W*BP + dm*x) / W'.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from dataclasses import dataclass

from heft.daemon.physics.club import BenchInputs
from heft.daemon.physics.statics import ClubStatics, balance_point_from_moment_in
from heft.daemon.physics.swingweight import (
    FULCRUM_14_IN,
    G_IN_PER_POINT,
    check_points_in_range,
    moment_about_g_in,
    points_from_moment_g_in,
)
from heft.daemon.physics.uncertainty import UncertainValue

# A mass placed this close to the fulcrum barely moves the swing weight; asking for it is a
# mistake on the bench rather than a correction (0.05 in ~ 1.3 mm).
_MIN_LEVER_ARM_IN = 0.05


class CorrectionError(ValueError):
    """A correction that cannot be made (mass at the fulcrum, more removed than the club has)."""


@dataclass(frozen=True)
class Correction:
    """A mass change at one position and the club it leaves."""

    target_points: float
    mass_g: float  # positive adds, negative removes
    position_in: float
    corrected_total_weight_g: float
    corrected_balance_point_in: float


def correction_mass_g(points_now: float, target_points: float, position_in: float) -> float:
    """dm = (P_target - P_now) * (g*in per point) / (x - 14); CorrectionError at the fulcrum."""
    arm_in = position_in - FULCRUM_14_IN
    if abs(arm_in) < _MIN_LEVER_ARM_IN:
        raise CorrectionError(
            f"a mass at {position_in:g} in sits on the 14 in fulcrum and cannot change the swing "
            "weight; choose a position nearer the head or the butt"
        )
    return (target_points - points_now) * G_IN_PER_POINT / arm_in


def correct_to_target(
    total_weight_g: float, balance_point_in: float, target_points: float, position_in: float
) -> Correction:
    """The mass to add (or remove) at ``position_in`` to bring the club to ``target_points``."""
    check_points_in_range(target_points)
    points_now = points_from_moment_g_in(moment_about_g_in(total_weight_g, balance_point_in))
    mass_g = correction_mass_g(points_now, target_points, position_in)
    new_weight_g = total_weight_g + mass_g
    if new_weight_g <= 0:
        raise CorrectionError(
            f"reaching the target at {position_in:g} in would remove {-mass_g:.1f} g, more than "
            f"the club's {total_weight_g:.1f} g; choose a position farther from the fulcrum"
        )
    moment_g_in = moment_about_g_in(total_weight_g, balance_point_in) + mass_g * (
        position_in - FULCRUM_14_IN
    )
    return Correction(
        target_points=target_points,
        mass_g=mass_g,
        position_in=position_in,
        corrected_total_weight_g=new_weight_g,
        corrected_balance_point_in=balance_point_from_moment_in(moment_g_in, new_weight_g),
    )


@dataclass(frozen=True)
class CorrectionNumbers:
    """A correction with expanded uncertainties (k = 2), None when no input carried one."""

    correction: Correction
    mass_g_u: float | None
    corrected_total_weight_g_u: float | None
    corrected_balance_point_in_u: float | None


def correction_numbers(
    bench: BenchInputs, target_points: float, position_in: UncertainValue
) -> CorrectionNumbers:
    """Correct the club read by ``bench``, propagating from the bench's raw inputs and the position.

    The target is exact (a choice, not a reading); the position's uncertainty counts.
    """
    statics = bench.evaluate()
    correction = correct_to_target(
        statics.total_weight_g, statics.balance_point_in, target_points, position_in.value
    )
    extra = {"correction_position_in": position_in}

    def corrected(s: ClubStatics, v: Mapping[str, float]) -> Correction:
        return correct_to_target(
            s.total_weight_g, s.balance_point_in, target_points, v["correction_position_in"]
        )

    def u_of(field: Callable[[Correction], float]) -> float | None:
        x = bench.propagate_with(extra, lambda s, v: field(corrected(s, v)))
        return bench.report_u(x)

    return CorrectionNumbers(
        correction=correction,
        mass_g_u=u_of(lambda c: c.mass_g),
        corrected_total_weight_g_u=u_of(lambda c: c.corrected_total_weight_g),
        corrected_balance_point_in_u=u_of(lambda c: c.corrected_balance_point_in),
    )
