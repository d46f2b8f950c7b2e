"""Numbers as the report prints them: rounded to what the instrument resolves (pure).

A value is rounded half-up to its step (0.1 g, 0.01 in, 0.1 point). Its expanded uncertainty is
rounded UP to the same step, never down: the GUM (JCGM 100:2008, 7.2.6) allows rounding an
uncertainty up rather than to the nearest digit, and a printed U that is smaller than the one
computed would claim more than the measurement knows.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from decimal import ROUND_CEILING, ROUND_HALF_UP, Decimal
from typing import Final

from heft.daemon.physics.swingweight import describe_points

# What the bench resolves on each quantity (the display steps of the measurement records).
WEIGHT_STEP_G: Final = Decimal("0.1")
BALANCE_STEP_IN: Final = Decimal("0.01")
POINTS_STEP: Final = Decimal("0.1")

NOT_A_NUMBER: Final = "not a number"

# Float noise is dropped before rounding: 0.30000000000000004 is 0.3, not a reason to round U up
# to 0.4. Twelve significant digits is far below any step here and far above double rounding.
_SIGNIFICANT: Final = 12


def _decimal(value: float) -> Decimal:
    return Decimal(f"{value:.{_SIGNIFICANT}g}")


def round_half_up(value: float, step: Decimal) -> Decimal:
    """``value`` to the nearest multiple of ``step``, halves away from zero (22.45 -> 22.5)."""
    return (_decimal(value) / step).quantize(Decimal(1), rounding=ROUND_HALF_UP) * step


def round_up(value: float, step: Decimal) -> Decimal:
    """``value`` (>= 0) to the next multiple of ``step`` at or above it (0.31 -> 0.4)."""
    return (_decimal(value) / step).quantize(Decimal(1), rounding=ROUND_CEILING) * step


def _places(step: Decimal) -> int:
    return max(0, -int(step.as_tuple().exponent))


def fixed(value: Decimal, step: Decimal) -> str:
    """``value`` printed with as many decimals as ``step`` has (0.1 -> one decimal)."""
    return f"{value:.{_places(step)}f}"


@dataclass(frozen=True, slots=True)
class Quantity:
    """A measured value and its expanded uncertainty (k = 2), rounded for print.

    ``value`` and ``u`` are the rounded numbers the text shows, so a plot drawn from them and
    the table can never disagree.
    """

    value: float
    u: float | None
    text: str
    u_text: str | None

    @classmethod
    def of(cls, value: float, u: float | None, step: Decimal) -> Quantity:
        if u is not None and not (math.isfinite(u) and u >= 0):
            u = None  # a record can only carry this by damage; print the value without it
        if not math.isfinite(value):
            return cls(value=math.nan, u=None, text=NOT_A_NUMBER, u_text=None)
        shown = round_half_up(value, step)
        shown_u = round_up(u, step) if u is not None else None
        return cls(
            value=float(shown),
            u=float(shown_u) if shown_u is not None else None,
            text=fixed(shown, step),
            u_text=fixed(shown_u, step) if shown_u is not None else None,
        )


def points_text(points: float) -> str:
    """Lorythmic label of ``points`` at the report's resolution (0.1 point): 'D1.9', '<A0'."""
    if not math.isfinite(points):
        return NOT_A_NUMBER
    return describe_points(float(round_half_up(points, POINTS_STEP)), decimals=1)


@dataclass(frozen=True, slots=True)
class Band:
    """A spec band from a check's low/high, as target and tolerance (either end may be open)."""

    low: float | None
    high: float | None
    text: str  # 'D2.0 ± 0.5', '421.0 ± 3.0', '≥ 400.0', '≤ 29.00'

    @property
    def target(self) -> float | None:
        if self.low is None or self.high is None:
            return None
        return (self.low + self.high) / 2.0

    @classmethod
    def of(cls, low: float | None, high: float | None, step: Decimal, points: bool) -> Band | None:
        """The band of a check, printed as a swing-weight label (``points``) or a number."""
        if low is None and high is None:
            return None

        def show(v: float) -> str:
            return points_text(v) if points else fixed(round_half_up(v, step), step)

        if low is not None and high is not None:
            centre = (low + high) / 2.0
            half = fixed(round_half_up((high - low) / 2.0, step), step)
            text = f"{show(centre)} ± {half}"
        elif low is not None:
            text = f"≥ {show(low)}"
        else:
            assert high is not None
            text = f"≤ {show(high)}"
        return cls(low, high, text)
