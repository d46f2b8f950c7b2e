"""Individuals and moving-range (I-MR) control chart of a series of single measurements.

With MR_i = |x_i - x_(i-1)| and MR-bar their mean (Montgomery, Introduction to Statistical
Quality Control, the control chart for individual measurements; ASTM MNL 7A, Part 3):

    sigma (within)    = MR-bar / d2
    individuals chart: centre x-bar (or a given centre), limits centre +- 3 sigma
    moving-range chart: centre MR-bar, UCL = D4 MR-bar, LCL = D3 MR-bar = 0

with d2, D3, D4 for subgroups of two from ``heft.daemon.quality.constants``. Limits are either
computed from a baseline (phase I) or given (phase II: a centre and a sigma agreed earlier).
"""

from __future__ import annotations

import itertools
import math
from collections.abc import Collection, Iterable
from dataclasses import dataclass

from heft.daemon.quality.constants import D2_N2, D3_N2, D4_N2
from heft.daemon.quality.inputs import QualityInputError, finite_number, finite_series, mean


def moving_ranges(values: tuple[float, ...]) -> tuple[float, ...]:
    """|x_i - x_(i-1)| for i = 1..n-1 (the range of each pair of successive points)."""
    return tuple(abs(b - a) for a, b in itertools.pairwise(values))


@dataclass(frozen=True, slots=True)
class ImrLimits:
    """Centre and within sigma of the individuals chart; everything else follows from them."""

    centre: float
    sigma: float

    @classmethod
    def given(cls, centre: float, sigma: float) -> ImrLimits:
        return cls(finite_number("centre", centre), finite_number("sigma", sigma, positive=True))

    @classmethod
    def from_baseline(cls, values: Iterable[float], centre: float | None = None) -> ImrLimits:
        """Phase I: sigma = MR-bar / d2 from the baseline; centre its mean unless given."""
        baseline = finite_series("baseline", values, minimum=2)
        mr_bar = mean(moving_ranges(baseline))
        if mr_bar == 0.0:
            raise QualityInputError(
                "baseline: every moving range is zero (all values equal), so no sigma; "
                "record the values at a finer resolution or give the limits"
            )
        middle = mean(baseline) if centre is None else finite_number("centre", centre)
        return cls(middle, mr_bar / D2_N2)

    def at(self, sigmas: float) -> float:
        """The line ``sigmas`` standard deviations from the centre (negative: below)."""
        return self.centre + sigmas * self.sigma

    @property
    def ucl(self) -> float:
        return self.at(3.0)

    @property
    def lcl(self) -> float:
        return self.at(-3.0)

    @property
    def mr_centre(self) -> float:
        """MR-bar (for given limits, the MR-bar that sigma implies: d2 x sigma)."""
        return D2_N2 * self.sigma

    @property
    def mr_ucl(self) -> float:
        return D4_N2 * self.mr_centre

    @property
    def mr_lcl(self) -> float:
        return D3_N2 * self.mr_centre

    def z(self, value: float) -> float:
        return (value - self.centre) / self.sigma


@dataclass(frozen=True, slots=True)
class ImrChart:
    limits: ImrLimits
    values: tuple[float, ...]
    moving_ranges: tuple[float, ...]  # moving_ranges[i - 1] belongs to point i

    @property
    def beyond_limits(self) -> tuple[int, ...]:
        """Points outside the individuals limits (run rule 1)."""
        ucl, lcl = self.limits.ucl, self.limits.lcl
        return tuple(i for i, x in enumerate(self.values) if x > ucl or x < lcl)

    @property
    def mr_beyond_limit(self) -> tuple[int, ...]:
        """Points whose moving range (from the point before) is above the MR chart's UCL."""
        return tuple(i + 1 for i, mr in enumerate(self.moving_ranges) if mr > self.limits.mr_ucl)


def imr_chart(values: Collection[float], limits: ImrLimits | None = None) -> ImrChart:
    """The chart of ``values``; without ``limits`` they come from the values themselves."""
    series = finite_series("values", values, minimum=1 if limits is not None else 2)
    chosen = limits if limits is not None else ImrLimits.from_baseline(series)
    if not math.isfinite(chosen.sigma) or chosen.sigma <= 0:
        raise QualityInputError(f"limits.sigma: expected a number above zero, got {chosen.sigma}")
    return ImrChart(chosen, series, moving_ranges(series))
