"""Checks on what the quality functions are handed, with messages that name the field."""

from __future__ import annotations

import math
from collections.abc import Iterable


class QualityInputError(ValueError):
    """The data handed to a quality function cannot be used; the message says which field."""


def finite_series(field: str, values: Iterable[float], minimum: int) -> tuple[float, ...]:
    """The values as a tuple of floats, all finite and at least ``minimum`` of them."""
    out: list[float] = []
    for index, value in enumerate(values):
        if isinstance(value, bool) or not isinstance(value, int | float):
            raise QualityInputError(f"{field}[{index}]: expected a number, got {value!r}")
        if not math.isfinite(value):
            raise QualityInputError(f"{field}[{index}]: expected a finite number, got {value!r}")
        out.append(float(value))
    if len(out) < minimum:
        raise QualityInputError(f"{field}: need at least {minimum} values, got {len(out)}")
    return tuple(out)


def finite_number(field: str, value: float, *, positive: bool = False) -> float:
    """One finite number (strictly positive when asked)."""
    if isinstance(value, bool) or not isinstance(value, int | float) or not math.isfinite(value):
        raise QualityInputError(f"{field}: expected a finite number, got {value!r}")
    if positive and value <= 0:
        raise QualityInputError(f"{field}: expected a number above zero, got {value!r}")
    return float(value)


def probability(field: str, value: float) -> float:
    """A probability strictly between 0 and 1 (a significance level or confidence)."""
    number = finite_number(field, value)
    if not 0.0 < number < 1.0:
        raise QualityInputError(f"{field}: expected a value between 0 and 1, got {value!r}")
    return number


def mean(values: tuple[float, ...]) -> float:
    return math.fsum(values) / len(values)
