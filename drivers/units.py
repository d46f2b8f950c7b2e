"""The one place that converts units. Exact definitions (international yard and pound, 1959).

Every other module works in grams and inches; convert at the edges with the helpers here.
"""

from __future__ import annotations

import math
import re
from typing import Final

GRAMS_PER_OUNCE: Final = 28.349523125  # 1 oz avoirdupois, exact
GRAMS_PER_POUND: Final = 453.59237  # 1 lb avoirdupois, exact
GRAMS_PER_KILOGRAM: Final = 1000.0
GRAMS_PER_TROY_OUNCE: Final = 31.1034768  # exact
GRAMS_PER_GRAIN: Final = 0.06479891  # exact
GRAMS_PER_CARAT: Final = 0.2  # metric carat, exact
GRAMS_PER_PENNYWEIGHT: Final = 24 * GRAMS_PER_GRAIN  # 1 dwt = 24 grains = 1/20 troy oz, exact
GRAMS_PER_METRIC_TON: Final = 1_000_000.0  # tonne, exact
MM_PER_INCH: Final = 25.4  # exact
CM_PER_INCH: Final = 2.54
STANDARD_GRAVITY_M_S2: Final = 9.80665  # standard acceleration of gravity, exact (3rd CGPM, 1901)

_MASS_TO_G: Final[dict[str, float]] = {
    "g": 1.0,
    "mg": 0.001,
    "kg": GRAMS_PER_KILOGRAM,
    "oz": GRAMS_PER_OUNCE,
    "lb": GRAMS_PER_POUND,
    "ozt": GRAMS_PER_TROY_OUNCE,
    "gr": GRAMS_PER_GRAIN,
    "ct": GRAMS_PER_CARAT,
    "dwt": GRAMS_PER_PENNYWEIGHT,
    "t": GRAMS_PER_METRIC_TON,
}
_LENGTH_TO_IN: Final[dict[str, float]] = {
    "in": 1.0,
    "mm": 1.0 / MM_PER_INCH,
    "cm": 1.0 / CM_PER_INCH,
}
_ALIASES: Final[dict[str, str]] = {
    "gram": "g", "grams": "g", "gm": "g",
    "kgs": "kg",
    "ounce": "oz", "ounces": "oz",
    "lbs": "lb", "pound": "lb", "pounds": "lb",
    "inch": "in", "inches": "in", '"': "in",
}


class UnitError(ValueError):
    """A unit or a quantity string that could not be understood."""


def canonical_unit(unit: str) -> str:
    """Lower-case, trimmed and de-aliased unit name (``'Grams' -> 'g'``)."""
    u = unit.strip().lower()
    return _ALIASES.get(u, u)


def mass_to_g(value: float, unit: str) -> float:
    """Convert a mass in ``unit`` to grams; raises UnitError for an unknown unit."""
    u = canonical_unit(unit)
    try:
        return value * _MASS_TO_G[u]
    except KeyError:
        raise UnitError(
            f"unknown mass unit {unit!r}; expected one of {sorted(_MASS_TO_G)}"
        ) from None


def g_to_mass(value_g: float, unit: str) -> float:
    """Convert grams to ``unit``."""
    return value_g / mass_to_g(1.0, unit)


def length_to_in(value: float, unit: str) -> float:
    """Convert a length in ``unit`` to inches; raises UnitError for an unknown unit."""
    u = canonical_unit(unit)
    try:
        return value * _LENGTH_TO_IN[u]
    except KeyError:
        raise UnitError(
            f"unknown length unit {unit!r}; expected one of {sorted(_LENGTH_TO_IN)}"
        ) from None


def in_to_mm(value_in: float) -> float:
    return value_in * MM_PER_INCH


def mm_to_in(value_mm: float) -> float:
    return value_mm / MM_PER_INCH


def m_to_in(value_m: float) -> float:
    """Metres (or m/s^2) to inches (or in/s^2)."""
    return value_m * 1000.0 / MM_PER_INCH


def g_to_oz(value_g: float) -> float:
    return value_g / GRAMS_PER_OUNCE


def oz_to_g(value_oz: float) -> float:
    return value_oz * GRAMS_PER_OUNCE


def g_in_to_oz_in(moment_g_in: float) -> float:
    return moment_g_in / GRAMS_PER_OUNCE


def oz_in_to_g_in(moment_oz_in: float) -> float:
    return moment_oz_in * GRAMS_PER_OUNCE


# 1 kg*cm^2 = 1000 g * (1/2.54 in)^2 = 155.0003 g*in^2 (derived from the exact inch).
G_IN2_PER_KG_CM2: Final = GRAMS_PER_KILOGRAM / (CM_PER_INCH**2)


def g_in2_to_kg_cm2(moi_g_in2: float) -> float:
    return moi_g_in2 / G_IN2_PER_KG_CM2


def kg_cm2_to_g_in2(moi_kg_cm2: float) -> float:
    return moi_kg_cm2 * G_IN2_PER_KG_CM2


_QUANTITY = re.compile(r"^\s*([-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?)\s*([a-zA-Z\"]*)\s*$")


def parse_quantity(text: str, *, kind: str) -> float:
    """Parse ``'390g'``, ``'13.76oz'``, ``'29.5in'``, ``'749mm'`` or a bare number.

    ``kind`` is ``'mass'`` (result in grams; bare number = grams) or ``'length'`` (result in
    inches; bare number = inches). Raises UnitError naming what was expected.
    """
    m = _QUANTITY.match(text)
    if kind == "mass":
        expected = "a mass such as 390, 390g, 13.76oz, 0.39kg"
    elif kind == "length":
        expected = "a length such as 29.5, 29.5in, 749mm, 74.9cm"
    else:
        raise ValueError(f"kind must be 'mass' or 'length', not {kind!r}")
    if m is None:
        raise UnitError(f"{text!r} is not {expected}")
    number = float(m.group(1))
    unit = m.group(2) or ("g" if kind == "mass" else "in")
    try:
        value = mass_to_g(number, unit) if kind == "mass" else length_to_in(number, unit)
    except UnitError:
        raise UnitError(f"{text!r} has unit {unit!r}; expected {expected}") from None
    if not math.isfinite(value):  # '1e400' matches the pattern but overflows
        raise UnitError(f"{text!r} is too large; expected {expected}")
    return value
