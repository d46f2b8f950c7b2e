"""The F, chi-square and normal distribution functions the quality figures need (pure Python).

Written here rather than taken from scipy so the station's runtime stays small: the F tail
gives the ANOVA p-values, the chi-square quantiles the confidence interval on Cp, the normal
quantile the interval on Cpk. The tests check every function against scipy.stats.

Methods (classical, named so a reader can follow them):
- regularized incomplete beta I_x(a, b) by its continued fraction, evaluated with the modified
  Lentz algorithm, using the symmetry I_x(a, b) = 1 - I_{1-x}(b, a) so the fraction is always
  taken on the side where it converges fast (Press et al., Numerical Recipes, 3rd ed., §6.4;
  the continued fraction is DLMF 8.17.22);
- regularized incomplete gamma P(a, x) by its series for x < a + 1 and its continued fraction
  otherwise (Numerical Recipes, 3rd ed., §6.2; DLMF 8.7.1 and 8.9.2);
- quantiles by bisection on the monotone tail function (slow but never leaves its bracket);
- the normal quantile from the standard library (statistics.NormalDist, Wichura's AS 241).
"""

from __future__ import annotations

import math
from statistics import NormalDist

_EPS = 1e-16  # stop when a continued-fraction step changes the value by less than this
_TINY = 1e-300  # Lentz's guard against a zero denominator
_MAX_ITER = 10_000


def _beta_fraction(a: float, b: float, x: float) -> float:
    """The continued fraction of I_x(a, b) (Numerical Recipes' betacf), modified Lentz."""
    qab, qap, qam = a + b, a + 1.0, a - 1.0
    c = 1.0
    d = 1.0 - qab * x / qap
    d = 1.0 / (d if abs(d) > _TINY else _TINY)
    h = d
    for m in range(1, _MAX_ITER):
        m2 = 2 * m
        for aa in (
            m * (b - m) * x / ((qam + m2) * (a + m2)),
            -(a + m) * (qab + m) * x / ((a + m2) * (qap + m2)),
        ):
            d = 1.0 + aa * d
            d = 1.0 / (d if abs(d) > _TINY else _TINY)
            c = 1.0 + aa / c
            c = c if abs(c) > _TINY else _TINY
            step = d * c
            h *= step
        if abs(step - 1.0) < _EPS:
            return h
    raise ArithmeticError(f"incomplete beta did not converge for a={a}, b={b}, x={x}")


def beta_tails(a: float, b: float, x: float, one_minus_x: float) -> tuple[float, float]:
    """(I_x(a, b), 1 - I_x(a, b)), each accurate in its own right.

    ``one_minus_x`` is passed separately so a caller that knows it exactly (the F tail does)
    does not lose digits to 1 - x. The tail computed directly is the small one; the other is
    1 minus it, where no digits are lost.
    """
    if x <= 0.0:
        return 0.0, 1.0
    if one_minus_x <= 0.0:
        return 1.0, 0.0
    log_front = (
        math.lgamma(a + b) - math.lgamma(a) - math.lgamma(b)
        + a * math.log(x) + b * math.log(one_minus_x)
    )  # fmt: skip
    front = math.exp(log_front)
    if x < (a + 1.0) / (a + b + 2.0):
        lower = front * _beta_fraction(a, b, x) / a
        return lower, 1.0 - lower
    upper = front * _beta_fraction(b, a, one_minus_x) / b
    return 1.0 - upper, upper


def f_sf(f_value: float, df_num: float, df_den: float) -> float:
    """P(F > f_value) for Snedecor's F with (df_num, df_den) degrees of freedom."""
    if math.isnan(f_value):
        return math.nan
    if f_value <= 0.0:
        return 1.0
    if math.isinf(f_value):
        return 0.0
    scale = df_den + df_num * f_value
    # P(F > f) = I_{d2/(d2 + d1 f)}(d2/2, d1/2) (DLMF 8.17 with the F-to-beta transform)
    return beta_tails(df_den / 2.0, df_num / 2.0, df_den / scale, df_num * f_value / scale)[0]


def _gamma_series(a: float, x: float) -> float:
    """P(a, x) by its power series (converges fast for x < a + 1)."""
    term = total = 1.0 / a
    ap = a
    for _ in range(_MAX_ITER):
        ap += 1.0
        term *= x / ap
        total += term
        if abs(term) < abs(total) * _EPS:
            return total * math.exp(-x + a * math.log(x) - math.lgamma(a))
    raise ArithmeticError(f"incomplete gamma series did not converge for a={a}, x={x}")


def _gamma_fraction(a: float, x: float) -> float:
    """Q(a, x) = 1 - P(a, x) by its continued fraction (x >= a + 1), modified Lentz."""
    b = x + 1.0 - a
    c = 1.0 / _TINY
    d = 1.0 / b
    h = d
    for i in range(1, _MAX_ITER):
        an = -i * (i - a)
        b += 2.0
        d = an * d + b
        d = 1.0 / (d if abs(d) > _TINY else _TINY)
        c = b + an / c
        c = c if abs(c) > _TINY else _TINY
        step = d * c
        h *= step
        if abs(step - 1.0) < _EPS:
            return h * math.exp(-x + a * math.log(x) - math.lgamma(a))
    raise ArithmeticError(f"incomplete gamma fraction did not converge for a={a}, x={x}")


def gamma_tails(a: float, x: float) -> tuple[float, float]:
    """(P(a, x), Q(a, x)): the regularized lower and upper incomplete gamma functions."""
    if x <= 0.0:
        return 0.0, 1.0
    if x < a + 1.0:
        lower = _gamma_series(a, x)
        return lower, 1.0 - lower
    upper = _gamma_fraction(a, x)
    return 1.0 - upper, upper


def chi2_cdf(x: float, df: float) -> float:
    """P(X <= x) for chi-square with ``df`` degrees of freedom."""
    return gamma_tails(df / 2.0, x / 2.0)[0]


def chi2_sf(x: float, df: float) -> float:
    """P(X > x) for chi-square with ``df`` degrees of freedom."""
    return gamma_tails(df / 2.0, x / 2.0)[1]


def chi2_ppf(q: float, df: float) -> float:
    """The chi-square quantile: the x with P(X <= x) = q, 0 < q < 1.

    For q above one half the upper tail is solved instead (P(X > x) = 1 - q), where the
    small probability keeps its digits.
    """
    if not 0.0 < q < 1.0:
        raise ValueError(f"chi-square quantile: probability must be in (0, 1), got {q}")
    if df <= 0.0:
        raise ValueError(f"chi-square quantile: degrees of freedom must be > 0, got {df}")
    upper = q > 0.5
    target = 1.0 - q if upper else q

    def tail(x: float) -> float:
        return chi2_sf(x, df) if upper else chi2_cdf(x, df)

    low, high = 0.0, max(1.0, df)
    while (tail(high) > target) if upper else (tail(high) < target):
        low, high = high, high * 2.0
    for _ in range(2_000):
        mid = 0.5 * (low + high)
        if mid in (low, high):
            break
        above = tail(mid) > target
        if above == upper:  # the root lies to the right of mid
            low = mid
        else:
            high = mid
    return 0.5 * (low + high)


def normal_ppf(q: float) -> float:
    """The standard normal quantile z with P(Z <= z) = q."""
    return NormalDist().inv_cdf(q)
