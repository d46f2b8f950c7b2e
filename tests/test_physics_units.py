"""Exact unit definitions (International Yard and Pound Agreement, 1959)."""

from __future__ import annotations

import pytest

from heft.drivers import units


def test_exact_definitions() -> None:
    # 1 lb = 0.45359237 kg and 1 yd = 0.9144 m exactly (International Yard and Pound, 1959).
    assert units.GRAMS_PER_POUND == 453.59237
    assert pytest.approx(units.GRAMS_PER_OUNCE, rel=1e-15) == units.GRAMS_PER_POUND / 16
    assert units.GRAMS_PER_OUNCE == 28.349523125
    assert pytest.approx(units.MM_PER_INCH, rel=1e-15) == 914.4 / 36
    assert units.mm_to_in(25.4) == 1.0
    assert units.m_to_in(0.0254) == pytest.approx(1.0, rel=1e-15)


def test_moi_units() -> None:
    # 1 kg*cm^2 = 1000 g / 2.54^2 in^2 = 155.0003 g*in^2 (derived; domain notes give 155.0)
    assert units.kg_cm2_to_g_in2(1.0) == pytest.approx(155.0003, abs=1e-4)
    assert units.g_in2_to_kg_cm2(units.kg_cm2_to_g_in2(2700.0)) == pytest.approx(2700.0)


@pytest.mark.parametrize(
    ("text", "kind", "value"),
    [
        ("390g", "mass", 390.0),
        ("13.76oz", "mass", 13.76 * 28.349523125),
        ("0.39kg", "mass", 390.0),
        ("390", "mass", 390.0),
        ("29.5in", "length", 29.5),
        ("749mm", "length", 749 / 25.4),
        ("74.9cm", "length", 749 / 25.4),
        ("29.5", "length", 29.5),
    ],
)
def test_parse_quantity(text: str, kind: str, value: float) -> None:
    assert units.parse_quantity(text, kind=kind) == pytest.approx(value)


def test_moment_conversion() -> None:
    assert units.oz_in_to_g_in(1.75) == pytest.approx(49.6117, abs=1e-4)
    assert units.g_in_to_oz_in(units.oz_in_to_g_in(213.5)) == pytest.approx(213.5)


@pytest.mark.parametrize("text", ["1e400", "1e400g", "nan", "inf", "12 furlongs", ""])
def test_parse_quantity_refuses_what_is_not_a_finite_quantity(text: str) -> None:
    with pytest.raises(units.UnitError, match="a mass such as"):
        units.parse_quantity(text, kind="mass")
