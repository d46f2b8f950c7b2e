"""GUM (JCGM 100:2008) resolution figures and first-order propagation."""

from __future__ import annotations

import math

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from heft.daemon.physics.uncertainty import (
    UncertainValue,
    any_uncertain,
    combine_u,
    expanded,
    net_resolution_u,
    propagate,
    repeatability_u,
    resolution_u,
)


def test_resolution_figures() -> None:
    # A display step d is a rectangular distribution of half-width d/2: u = d/sqrt(12)
    # (GUM F.2.2.1, 4.3.7). A net reading (two rounded readings): d/sqrt(6) (domain notes, GUM).
    assert resolution_u(0.1) == pytest.approx(0.028868, abs=1e-6)
    assert resolution_u(1.0) == pytest.approx(1 / math.sqrt(12))
    assert net_resolution_u(1.0) == pytest.approx(1 / math.sqrt(6))
    assert net_resolution_u(0.1) == pytest.approx(0.040825, abs=1e-6)


def test_resolution_matches_a_simulated_rounding() -> None:
    # The standard deviation of a rounding error, computed by brute force over a fine grid
    # (definition of variance), equals d/sqrt(12).
    d = 0.5
    n = 20000
    errors = [((i + 0.5) / n - 0.5) * d for i in range(n)]
    rms = math.sqrt(sum(e * e for e in errors) / n)
    assert rms == pytest.approx(resolution_u(d), rel=1e-6)


def test_expanded_is_k_times_u() -> None:
    assert expanded(0.3) == pytest.approx(0.6)  # k = 2 (GUM 6.2.1, 6.3.3)
    assert expanded(0.3, k=3.0) == pytest.approx(0.9)


def test_repeatability_is_s_over_root_n() -> None:
    # GUM 4.2.3: s(q-bar) = s(q)/sqrt(n)
    samples = [412.1, 412.3, 412.2, 412.4, 412.0]
    s = math.sqrt(sum((x - 412.2) ** 2 for x in samples) / 4)
    assert repeatability_u(samples) == pytest.approx(s / math.sqrt(5))
    with pytest.raises(ValueError):
        repeatability_u([1.0])


def test_linear_sum_adds_in_quadrature() -> None:
    # GUM eq. (10) with c_i = 1
    y = propagate(
        lambda a, b: a + b, {"a": UncertainValue(100.0, 0.3), "b": UncertainValue(5, 0.4)}
    )
    assert y.value == 105.0
    assert y.u == pytest.approx(0.5, rel=1e-9)


def test_product_relative_uncertainties_add_in_quadrature() -> None:
    # GUM 5.1.6 eq. (12): for y = x1*x2, (u_y/y)^2 = (u1/x1)^2 + (u2/x2)^2
    y = propagate(
        lambda m, x: m * x, {"m": UncertainValue(400.0, 2.0), "x": UncertainValue(15.0, 0.1)}
    )
    rel = math.sqrt((2.0 / 400.0) ** 2 + (0.1 / 15.0) ** 2)
    assert y.u / y.value == pytest.approx(rel, rel=1e-6)


def test_inputs_without_u_contribute_nothing() -> None:
    y = propagate(lambda a, b: a * b, {"a": UncertainValue(3.0), "b": UncertainValue(4.0)})
    assert y == UncertainValue(12.0, 0.0)
    assert not any_uncertain([UncertainValue(1.0), UncertainValue(2.0, 0.0)])
    assert any_uncertain([UncertainValue(1.0), UncertainValue(2.0, 0.01)])


@pytest.mark.parametrize(("value", "u"), [(math.nan, 0.0), (1.0, -0.1), (1.0, math.inf)])
def test_bad_values_refused(value: float, u: float) -> None:
    with pytest.raises(ValueError):
        UncertainValue(value, u)


@settings(deadline=None)  # no timing in unit tests: the CI machine is shared
@given(st.floats(0.5, 100.0), st.floats(0.0, 1.0), st.floats(0.5, 100.0), st.floats(0.0, 1.0))
def test_quotient_matches_analytic_sensitivities(a: float, ua: float, b: float, ub: float) -> None:
    # y = a/b: dy/da = 1/b, dy/db = -a/b^2 (calculus), combined per GUM eq. (10)
    y = propagate(lambda a, b: a / b, {"a": UncertainValue(a, ua), "b": UncertainValue(b, ub)})
    expected = combine_u(ua / b, a * ub / b**2)
    assert y.u == pytest.approx(expected, rel=1e-5, abs=1e-12)


def test_a_value_that_does_not_depend_on_an_input_gets_none_of_its_u() -> None:
    # y = (a*b)/a equals b but rounds differently as a moves (at these values a central
    # difference sees about 1e-12 of pure rounding); the first-order law (GUM eq. 10) has
    # dy/da = 0 exactly, so a's uncertainty must not leak in as rounding noise.
    y = propagate(
        lambda a, b: (a * b) / a, {"a": UncertainValue(395.5, 0.05), "b": UncertainValue(31.83)}
    )
    assert y.u == 0.0 and not y.has_u
    # A real dependence, however small against the value, still counts (GUM eq. 10).
    z = propagate(
        lambda a, b: b + 1e-6 * a, {"a": UncertainValue(412.1, 0.05), "b": UncertainValue(29.1)}
    )
    assert z.u == pytest.approx(1e-6 * 0.05, rel=1e-6)
