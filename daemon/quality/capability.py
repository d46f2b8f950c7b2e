"""Process capability against a two-sided tolerance: Cp, Cpk (Cpu, Cpl) and their intervals.

    Cp  = (USL - LSL) / (6 sigma)
    Cpu = (USL - mean) / (3 sigma),  Cpl = (mean - LSL) / (3 sigma),  Cpk = min(Cpu, Cpl)

(Montgomery, Introduction to Statistical Quality Control, process capability ratios.)

``sigma_basis="overall"`` uses the sample standard deviation of all values (n - 1 divisor; the
AIAG SPC manual calls the indices from this sigma Pp and Ppk); ``"within"`` uses the short-term
sigma MR-bar / d2 of the series in the order given (what that manual calls Cp and Cpk).

Confidence intervals, for the overall sigma only (the chi-square interval holds for s with
n - 1 degrees of freedom; the moving-range sigma has fewer effective degrees of freedom and is
given no interval here rather than a wrong one):
- Cp: Cp sqrt(chi2(alpha/2; n-1) / (n-1)) <= Cp <= Cp sqrt(chi2(1-alpha/2; n-1) / (n-1)),
  chi2(q; v) the q quantile (Montgomery, same chapter);
- Cpk: Cpk +- z(1-alpha/2) sqrt(1/(9n) + Cpk^2 / (2(n-1))), the normal approximation of
  A. F. Bissell, "How reliable is your capability index?", Applied Statistics 39(3), 1990,
  pp. 331-340.
Both assume independent, normally distributed values.
"""

from __future__ import annotations

import math
from collections.abc import Iterable
from dataclasses import dataclass
from typing import Literal

from heft.daemon.quality.distributions import chi2_ppf, normal_ppf
from heft.daemon.quality.imr import ImrLimits
from heft.daemon.quality.inputs import (
    QualityInputError,
    finite_number,
    finite_series,
    mean,
    probability,
)

SigmaBasis = Literal["overall", "within"]


@dataclass(frozen=True, slots=True)
class Interval:
    low: float
    high: float
    confidence: float


@dataclass(frozen=True, slots=True)
class Capability:
    lsl: float
    usl: float
    n: int
    mean: float
    sigma: float
    sigma_basis: SigmaBasis
    cp: float
    cpu: float
    cpl: float
    cp_interval: Interval | None  # None for the within sigma (see the module docstring)
    cpk_interval: Interval | None

    @property
    def cpk(self) -> float:
        return min(self.cpu, self.cpl)


def sample_sd(values: tuple[float, ...]) -> float:
    """Standard deviation with the n - 1 divisor."""
    centre = mean(values)
    return math.sqrt(math.fsum((v - centre) ** 2 for v in values) / (len(values) - 1))


def cp_interval(cp: float, n: int, confidence: float) -> Interval:
    alpha, df = 1.0 - confidence, n - 1
    low = cp * math.sqrt(chi2_ppf(alpha / 2.0, df) / df)
    high = cp * math.sqrt(chi2_ppf(1.0 - alpha / 2.0, df) / df)
    return Interval(low, high, confidence)


def cpk_interval_bissell(cpk: float, n: int, confidence: float) -> Interval:
    half = normal_ppf(1.0 - (1.0 - confidence) / 2.0) * math.sqrt(
        1.0 / (9.0 * n) + cpk**2 / (2.0 * (n - 1))
    )
    return Interval(cpk - half, cpk + half, confidence)


def capability(
    values: Iterable[float],
    lsl: float,
    usl: float,
    *,
    sigma_basis: SigmaBasis = "overall",
    confidence: float = 0.95,
) -> Capability:
    """Capability of ``values`` against [lsl, usl] (same unit as the values)."""
    lower, upper = finite_number("lsl", lsl), finite_number("usl", usl)
    if upper <= lower:
        raise QualityInputError(f"usl: must be above lsl ({lower}), got {upper}")
    confidence = probability("confidence", confidence)
    series = finite_series("values", values, minimum=2)
    if sigma_basis == "overall":
        sigma = sample_sd(series)
    elif sigma_basis == "within":
        sigma = ImrLimits.from_baseline(series).sigma if len(set(series)) > 1 else 0.0
    else:
        raise QualityInputError(f"sigma_basis: expected 'overall' or 'within', got {sigma_basis!r}")
    if sigma == 0.0:
        raise QualityInputError("values: all equal, so sigma is zero and no index can be formed")
    centre = mean(series)
    cp = (upper - lower) / (6.0 * sigma)
    cpu, cpl = (upper - centre) / (3.0 * sigma), (centre - lower) / (3.0 * sigma)
    intervals = sigma_basis == "overall"
    n = len(series)
    return Capability(
        lower, upper, n, centre, sigma, sigma_basis, cp, cpu, cpl,
        cp_interval(cp, n, confidence) if intervals else None,
        cpk_interval_bissell(min(cpu, cpl), n, confidence) if intervals else None,
    )  # fmt: skip
