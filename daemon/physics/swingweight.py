"""Moment about the fulcrum and the Lorythmic swing-weight scale (pure, no I/O).

The 14-inch scale: fulcrum 14 in from the butt, letters A..G of ten points each, A0 = 0 points.
The scale is anchored at A0 = 161 oz*in with 1.75 oz*in per point (trade tables give C0 = 196,
C8 = 210 and D0 = 213.5 oz*in, which fit exactly). We anchor at A0 rather than use the common
"50 g*in per point" rounding, which drifts about 0.2 point by the D range.

Labels: a letter and the points within the letter, printed with a fixed number of decimals
(``label_from_points(31.4) == 'D1.4'``, whole values print ``'D2.0'``; with ``decimals=0`` they
print ``'D2'``). The top of the scale prints ``'G10.0'``. Parsing accepts ``D2``, ``d2``, ``D-2``,
``D 2.5`` and ``G10``. Anything outside A0..G10 is an error here; :func:`describe_points` gives
the bounded text ``'<A0'`` / ``'>G10'`` for records that must still carry a label.
"""

from __future__ import annotations

import math
import re
from typing import Final

from heft.drivers.units import GRAMS_PER_OUNCE, g_in_to_oz_in, g_to_oz, oz_in_to_g_in

FULCRUM_14_IN: Final = 14.0
FULCRUM_12_IN: Final = 12.0
A0_OZ_IN: Final = 161.0
OZ_IN_PER_POINT: Final = 1.75
A0_G_IN: Final = A0_OZ_IN * GRAMS_PER_OUNCE  # 4564.27 g*in
G_IN_PER_POINT: Final = OZ_IN_PER_POINT * GRAMS_PER_OUNCE  # 49.6117 g*in
POINTS_PER_LETTER: Final = 10
LETTERS: Final = "ABCDEFG"
MIN_POINTS: Final = 0.0  # A0
MAX_POINTS: Final = 70.0  # G10
BELOW_RANGE_LABEL: Final = "<A0"
ABOVE_RANGE_LABEL: Final = ">G10"
# Float noise allowed at the range ends (a club computed at exactly G10 may land at 70.000000001).
_RANGE_SLACK_POINTS: Final = 1e-9


class SwingweightLabelError(ValueError):
    """A swing-weight label that is not a letter A-G followed by 0-9.9 (G up to 10)."""


class SwingweightRangeError(ValueError):
    """A swing weight outside A0..G10."""


def moment_about_g_in(
    total_weight_g: float, balance_point_in: float, fulcrum_in: float = FULCRUM_14_IN
) -> float:
    """Static moment of the club about a fulcrum ``fulcrum_in`` from the butt, in g*in."""
    return total_weight_g * (balance_point_in - fulcrum_in)


def moment_about_oz_in(
    total_weight_g: float, balance_point_in: float, fulcrum_in: float = FULCRUM_14_IN
) -> float:
    """Static moment about the fulcrum in oz*in."""
    return g_in_to_oz_in(moment_about_g_in(total_weight_g, balance_point_in, fulcrum_in))


def points_from_moment_g_in(moment_g_in: float) -> float:
    """Lorythmic points (A0 = 0, D0 = 30) from the moment about the 14-inch fulcrum.

    Linear and unbounded: a value below 0 or above 70 is off the scale, which
    :func:`check_points_in_range` or :func:`describe_points` reports.
    """
    return (moment_g_in - A0_G_IN) / G_IN_PER_POINT


def moment_g_in_from_points(points: float) -> float:
    """Moment about the 14-inch fulcrum (g*in) for a number of Lorythmic points."""
    return A0_G_IN + points * G_IN_PER_POINT


def points_from_moment_oz_in(moment_oz_in: float) -> float:
    return points_from_moment_g_in(oz_in_to_g_in(moment_oz_in))


def moment_oz_in_from_points(points: float) -> float:
    return g_in_to_oz_in(moment_g_in_from_points(points))


def points_in_range(points: float) -> bool:
    """True when ``points`` lies on the A0..G10 scale."""
    return MIN_POINTS - _RANGE_SLACK_POINTS <= points <= MAX_POINTS + _RANGE_SLACK_POINTS


def check_points_in_range(points: float) -> float:
    """Return ``points`` unchanged, or raise SwingweightRangeError saying which end it is off."""
    if math.isnan(points):
        raise SwingweightRangeError("swing weight is not a number")
    if points < MIN_POINTS - _RANGE_SLACK_POINTS:
        raise SwingweightRangeError(
            f"swing weight {points:.2f} points is below A0 (0 points); the scale runs A0..G10"
        )
    if points > MAX_POINTS + _RANGE_SLACK_POINTS:
        raise SwingweightRangeError(
            f"swing weight {points:.2f} points is above G10 (70 points); the scale runs A0..G10"
        )
    return points


def label_from_points(points: float, decimals: int = 1) -> str:
    """Label such as ``'D1.4'`` for ``points`` (31.4); raises SwingweightRangeError off A0..G10.

    The value is rounded to ``decimals`` first and then split, so 29.96 prints ``'D0.0'`` rather
    than ``'C10.0'``. Only G may show 10 (70 points is ``'G10.0'``).
    """
    if decimals < 0:
        raise ValueError(f"decimals must be >= 0, not {decimals}")
    check_points_in_range(points)
    rounded = round(min(max(points, MIN_POINTS), MAX_POINTS), decimals)
    if rounded >= MAX_POINTS:
        letter_index, within = len(LETTERS) - 1, float(POINTS_PER_LETTER)
    else:
        # Work in integer steps of the last decimal so the split is exact.
        steps = round(rounded * 10**decimals)
        per_letter = POINTS_PER_LETTER * 10**decimals
        letter_index, within_steps = divmod(steps, per_letter)
        within = within_steps / 10**decimals
    return f"{LETTERS[letter_index]}{within:.{decimals}f}"


def describe_points(points: float, decimals: int = 1) -> str:
    """Like :func:`label_from_points`, but off the scale gives ``'<A0'`` or ``'>G10'``."""
    if not math.isnan(points) and points < MIN_POINTS - _RANGE_SLACK_POINTS:
        return BELOW_RANGE_LABEL
    if not math.isnan(points) and points > MAX_POINTS + _RANGE_SLACK_POINTS:
        return ABOVE_RANGE_LABEL
    return label_from_points(points, decimals)


_LABEL: Final = re.compile(r"^\s*([A-Za-z])\s*-?\s*(\d+(?:\.\d*)?|\.\d+)\s*$")
_LABEL_FORM: Final = "a letter A-G and 0-9.9 such as D2, d-2, C9.9 or G10"


def points_from_label(label: str) -> float:
    """Points for a label such as ``D2``, ``d-2.5`` or ``C9.9``; raises SwingweightLabelError."""
    m = _LABEL.match(label)
    if m is None:
        raise SwingweightLabelError(f"swing weight {label!r} is not {_LABEL_FORM}")
    letter = m.group(1).upper()
    if letter not in LETTERS:
        raise SwingweightLabelError(
            f"swing weight {label!r}: letter {letter!r} is not on the scale; expected {_LABEL_FORM}"
        )
    within = float(m.group(2))
    letter_index = LETTERS.index(letter)
    if within >= POINTS_PER_LETTER and not (letter == LETTERS[-1] and within == POINTS_PER_LETTER):
        raise SwingweightLabelError(
            f"swing weight {label!r}: the number after {letter} must be below 10 (only G10 "
            "reaches 10); "
            f"expected {_LABEL_FORM}"
        )
    return letter_index * POINTS_PER_LETTER + within


def label_decimals(label: str) -> int:
    """Decimals a label was written with, at least one: ``'D2'`` -> 1, ``'C9.95'`` -> 2.

    Echoing a label to the precision it was given keeps ``C9.95`` from printing as ``C9.9``
    (or ``D0.0``) while the arithmetic uses 29.95 points.
    """
    m = _LABEL.match(label)
    if m is None:
        raise SwingweightLabelError(f"swing weight {label!r} is not {_LABEL_FORM}")
    _, _, fraction = m.group(2).partition(".")
    return max(1, len(fraction))


# --- the older 12-inch ("official") scale -------------------------------------------------------


def moment_12in_oz_in(total_weight_g: float, balance_point_in: float) -> float:
    """Moment about a 12-inch fulcrum in oz*in (the older scale)."""
    return moment_about_oz_in(total_weight_g, balance_point_in, FULCRUM_12_IN)


def moment_12in_from_14in_oz_in(moment_14in_oz_in: float, total_weight_g: float) -> float:
    """M12 = M14 + 2 in * W: converting between the scales needs the total weight."""
    return moment_14in_oz_in + (FULCRUM_14_IN - FULCRUM_12_IN) * g_to_oz(total_weight_g)


def moment_14in_from_12in_oz_in(moment_12in_oz_in: float, total_weight_g: float) -> float:
    """Inverse of :func:`moment_12in_from_14in_oz_in`."""
    return moment_12in_oz_in - (FULCRUM_14_IN - FULCRUM_12_IN) * g_to_oz(total_weight_g)
