"""The pure-Python F, chi-square and normal functions against scipy.stats (reference library)."""

from __future__ import annotations

import math

import pytest
from hypothesis import assume, given, settings
from hypothesis import strategies as st
from scipy import stats

from heft.daemon.quality.distributions import chi2_cdf, chi2_ppf, chi2_sf, f_sf, normal_ppf

REL = 1e-9


@settings(max_examples=300, deadline=None)
@given(
    f=st.floats(1e-6, 1e4),
    df_num=st.integers(1, 200),
    df_den=st.integers(1, 400),
)
def test_f_tail_matches_scipy(f: float, df_num: int, df_den: int) -> None:
    expected = stats.f.sf(f, df_num, df_den)
    # Far out in the tail scipy itself drifts (see the test below), so it is the reference
    # down to 1e-100 only; no ANOVA decision lives below that.
    assume(expected > 1e-100)
    assert f_sf(f, df_num, df_den) == pytest.approx(expected, rel=REL)


@pytest.mark.parametrize(
    ("f", "df_num", "df_den", "expected"),
    [
        (7062.0, 68, 182, 5.541397927977386e-282),  # scipy 1.17.1 gives 5.5413979224e-282
        (1444.0, 60, 248, 4.200325903880477e-285),  # scipy 1.17.1 gives 4.2003146598e-285
    ],
)
def test_f_tail_deep_in_the_tail(f: float, df_num: int, df_den: int, expected: float) -> None:
    # Reference: mpmath 1.3.0, betainc(d2/2, d1/2, 0, d2/(d2 + d1 f), regularized=True) at 40
    # significant digits, computed once while writing this test (mpmath is not a dependency).
    assert f_sf(f, df_num, df_den) == pytest.approx(expected, rel=REL)


def test_f_tail_edges() -> None:
    assert f_sf(0.0, 2, 10) == 1.0
    assert f_sf(math.inf, 2, 10) == 0.0
    assert math.isnan(f_sf(math.nan, 2, 10))


@settings(max_examples=300, deadline=None)
@given(x=st.floats(1e-6, 2e3), df=st.integers(1, 500))
def test_chi2_tails_match_scipy(x: float, df: int) -> None:
    assert chi2_cdf(x, df) == pytest.approx(stats.chi2.cdf(x, df), rel=REL, abs=1e-300)
    assert chi2_sf(x, df) == pytest.approx(stats.chi2.sf(x, df), rel=REL, abs=1e-300)


@settings(max_examples=300, deadline=None)
@given(q=st.floats(1e-8, 1 - 1e-8), df=st.integers(1, 1000))
def test_chi2_quantile_matches_scipy(q: float, df: int) -> None:
    assert chi2_ppf(q, df) == pytest.approx(stats.chi2.ppf(q, df), rel=REL)


def test_chi2_quantile_refuses_impossible_probabilities() -> None:
    for q in (0.0, 1.0, -0.1):
        with pytest.raises(ValueError, match="probability"):
            chi2_ppf(q, 5)
    with pytest.raises(ValueError, match="degrees of freedom"):
        chi2_ppf(0.5, 0)


@pytest.mark.parametrize("q", [0.001, 0.025, 0.5, 0.95, 0.975, 0.9995])
def test_normal_quantile_matches_scipy(q: float) -> None:
    assert normal_ppf(q) == pytest.approx(stats.norm.ppf(q), rel=REL, abs=1e-15)
