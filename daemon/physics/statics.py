"""Statics of the two ways a bench reads a club (pure, no I/O; grams and inches from the butt).

Two supports: tared readings F_a at x_a and F_b at x_b (positions from the butt stop) carry the
whole club, so W = F_a + F_b, W*BP = F_a*x_a + F_b*x_b and M = sum F_i*(x_i - fulcrum).

Fulcrum lever (the classic swing-weight beam): the beam pivots at the fulcrum and a scale or
load cell at lever arm r from the pivot reads the force F that holds the club level, so the
club's moment about the fulcrum is M = F*r (the empty beam's own moment is zeroed away first).
A separate weighing gives W, and BP = fulcrum + M/W.

Butt gap: both benches place the club against a butt stop. A club resting ``butt_gap_in`` short
of the stop (its butt that far towards the head) sits on supports at x_i - gap from its own
butt, and on the lever beam its moment about its own 14-inch point is F*r - W*gap. The gap is
normally 0; its uncertainty is how well clubs are seated, one error shared by every position.
"""

from __future__ import annotations

from typing import NamedTuple

from heft.daemon.physics.swingweight import FULCRUM_14_IN


class StaticsError(ValueError):
    """Readings that cannot describe a club resting on its supports."""


class ClubStatics(NamedTuple):
    total_weight_g: float
    balance_point_in: float
    moment_g_in: float


def balance_point_from_moment_in(
    moment_g_in: float, total_weight_g: float, fulcrum_in: float = FULCRUM_14_IN
) -> float:
    """BP = fulcrum + M/W; raises StaticsError when the total weight is not positive."""
    if total_weight_g <= 0:
        raise StaticsError(
            f"total weight must be positive to place the balance point, not {total_weight_g:g} g"
        )
    return fulcrum_in + moment_g_in / total_weight_g


def two_support_statics(
    reading_a_g: float,
    position_a_in: float,
    reading_b_g: float,
    position_b_in: float,
    fulcrum_in: float = FULCRUM_14_IN,
    butt_gap_in: float = 0.0,
) -> ClubStatics:
    """W, BP and the moment about ``fulcrum_in`` from two tared support readings."""
    position_a_in -= butt_gap_in
    position_b_in -= butt_gap_in
    if position_a_in == position_b_in:
        raise StaticsError("the two supports must stand at different positions")
    total_weight_g = reading_a_g + reading_b_g
    if total_weight_g <= 0:
        raise StaticsError(
            f"the two readings add to {total_weight_g:g} g; a club weighs more than 0 g"
        )
    moment_g_in = reading_a_g * (position_a_in - fulcrum_in) + reading_b_g * (
        position_b_in - fulcrum_in
    )
    balance_point_in = (reading_a_g * position_a_in + reading_b_g * position_b_in) / total_weight_g
    return ClubStatics(total_weight_g, balance_point_in, moment_g_in)


def lever_moment_g_in(force_g: float, lever_arm_in: float) -> float:
    """Moment about the pivot held by a force ``force_g`` read at ``lever_arm_in`` from it."""
    return force_g * lever_arm_in


def lever_statics(
    force_g: float,
    lever_arm_in: float,
    total_weight_g: float,
    fulcrum_in: float = FULCRUM_14_IN,
    butt_gap_in: float = 0.0,
) -> ClubStatics:
    """Moment from the lever beam plus a separate total weight -> W, BP, moment."""
    if lever_arm_in <= 0:
        raise StaticsError(
            f"lever arm must be a positive distance from the pivot, not {lever_arm_in:g} in"
        )
    moment_g_in = lever_moment_g_in(force_g, lever_arm_in) - total_weight_g * butt_gap_in
    return ClubStatics(
        total_weight_g,
        balance_point_from_moment_in(moment_g_in, total_weight_g, fulcrum_in),
        moment_g_in,
    )
