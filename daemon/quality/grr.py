"""Gauge R&R by the ANOVA method: variance components, %GRR, ndc and the verdict.

Following the AIAG Measurement Systems Analysis reference manual, 4th edition (ANOVA method;
formulas from memory, and the same as Montgomery, Introduction to Statistical Quality Control,
chapter on gauge and measurement system capability studies). With n parts, k operators, r trials
and the mean squares of ``heft.daemon.quality.grr_anova``:

    repeatability (EV)  sigma^2 = MS_e
    interaction         sigma^2 = (MS_PO - MS_e) / r
    operator            sigma^2 = (MS_O - MS_PO) / (n r)
    part (PV)           sigma^2 = (MS_P - MS_PO) / (k r)
    reproducibility AV  = operator + interaction;  GRR = EV + AV;  TV = GRR + PV  (variances)

When the interaction is not significant (its p-value above ``pool_alpha``, 0.25 by the manual's
convention) it is pooled into repeatability: MS_e becomes the pooled mean square, the interaction
component is zero and MS_PO is replaced by the pooled MS in the formulas above. A component
that comes out negative is set to zero and named in ``clamped``.

%GRR = 100 GRR / TV (standard deviations); % of tolerance = 100 x (multiplier x sigma_GRR) /
tolerance, the multiplier being 6 (4th edition) or 5.15 (earlier editions). ndc = 1.41 PV/GRR,
truncated. Verdict bands (MSA manual): under 10 % acceptable, 10 % to 30 % may be acceptable
depending on the application, over 30 % unacceptable; ndc of 5 or more.
"""

from __future__ import annotations

import enum
import math
from collections.abc import Iterable
from dataclasses import dataclass

from heft.daemon.quality.grr_anova import (
    INTERACTION,
    OPERATOR,
    PART,
    REPEATABILITY,
    AnovaTable,
    BalancedStudy,
    FTest,
    GaugeReading,
    anova_pooled,
    anova_with_interaction,
    sums_of_squares,
)
from heft.daemon.quality.inputs import QualityInputError, finite_number

POOL_ALPHA_MSA = 0.25  # pool the interaction when its p-value is above this (MSA manual)
NDC_MINIMUM = 5
ACCEPTABLE_BELOW_PCT = 10.0
UNACCEPTABLE_ABOVE_PCT = 30.0


class GrrVerdict(enum.StrEnum):
    ACCEPTABLE = "acceptable"  # under 10 %
    MARGINAL = "may be acceptable"  # 10 % to 30 %, depending on the application
    UNACCEPTABLE = "unacceptable"  # over 30 %


def grr_verdict(percent: float) -> GrrVerdict:
    if percent < ACCEPTABLE_BELOW_PCT:
        return GrrVerdict.ACCEPTABLE
    if percent <= UNACCEPTABLE_ABOVE_PCT:
        return GrrVerdict.MARGINAL
    return GrrVerdict.UNACCEPTABLE


@dataclass(frozen=True, slots=True)
class VarianceComponents:
    """Variances (squared units), after clamping negatives to zero."""

    repeatability: float
    operator: float
    interaction: float
    part: float
    clamped: tuple[str, ...]  # components that came out negative and were set to zero

    @property
    def reproducibility(self) -> float:
        return self.operator + self.interaction

    @property
    def grr(self) -> float:
        return self.repeatability + self.reproducibility

    @property
    def total(self) -> float:
        return self.grr + self.part


@dataclass(frozen=True, slots=True)
class GrrResult:
    with_interaction: AnovaTable
    pooled_table: AnovaTable
    pooled: bool  # True: the components come from the pooled (additive) table
    components: VarianceComponents
    multiplier: float  # study variation = multiplier x sigma (6, or 5.15)
    tolerance: float | None

    def sigma(self, name: str) -> float:
        """Standard deviation of a component: ev, av, grr, pv, tv, operator, interaction."""
        c = self.components
        variances = {
            "ev": c.repeatability, "av": c.reproducibility, "grr": c.grr, "pv": c.part,
            "tv": c.total, "operator": c.operator, "interaction": c.interaction,
        }  # fmt: skip
        return math.sqrt(variances[name])

    def study_variation(self, name: str) -> float:
        return self.multiplier * self.sigma(name)

    def percent_of_total(self, name: str) -> float:
        """100 x sigma_name / sigma_TV (nan when the total variation is zero)."""
        tv = self.sigma("tv")
        return 100.0 * self.sigma(name) / tv if tv > 0 else math.nan

    def percent_of_tolerance(self, name: str) -> float | None:
        if self.tolerance is None:
            return None
        return 100.0 * self.study_variation(name) / self.tolerance

    @property
    def ndc(self) -> int | None:
        """Number of distinct categories, 1.41 PV/GRR truncated; None when GRR is zero."""
        grr = self.sigma("grr")
        return None if grr == 0 else math.floor(1.41 * self.sigma("pv") / grr)

    @property
    def verdict_of_total(self) -> GrrVerdict:
        return grr_verdict(self.percent_of_total("grr"))

    @property
    def verdict_of_tolerance(self) -> GrrVerdict | None:
        pct = self.percent_of_tolerance("grr")
        return None if pct is None else grr_verdict(pct)

    @property
    def ndc_adequate(self) -> bool:
        ndc = self.ndc
        return ndc is None or ndc >= NDC_MINIMUM


def _components(table: AnovaTable, n: int, k: int, r: int, pooled: bool) -> VarianceComponents:
    ms_e = table.row(REPEATABILITY).ms
    ms_po = ms_e if pooled else table.row(INTERACTION).ms
    raw = {
        "repeatability": ms_e,
        "interaction": 0.0 if pooled else (ms_po - ms_e) / r,
        "operator": (table.row(OPERATOR).ms - ms_po) / (n * r),
        "part": (table.row(PART).ms - ms_po) / (k * r),
    }
    clamped = tuple(name for name, value in raw.items() if value < 0)
    kept = {name: max(value, 0.0) for name, value in raw.items()}
    return VarianceComponents(clamped=clamped, **kept)


def gauge_rr(
    readings: Iterable[GaugeReading],
    *,
    tolerance: float | None = None,
    pool_alpha: float | None = POOL_ALPHA_MSA,
    multiplier: float = 6.0,
    f_test: FTest = "msa",
) -> GrrResult:
    """Crossed gauge R&R by ANOVA from the tidy table of readings.

    ``tolerance`` is USL - LSL in the readings' unit (for % of tolerance). ``pool_alpha`` None
    never pools the interaction; otherwise it is pooled when its p-value exceeds pool_alpha.
    """
    if tolerance is not None:
        tolerance = finite_number("tolerance", tolerance, positive=True)
    multiplier = finite_number("multiplier", multiplier, positive=True)
    if pool_alpha is not None and not 0.0 <= finite_number("pool_alpha", pool_alpha) <= 1.0:
        raise QualityInputError(f"pool_alpha: expected a value from 0 to 1, got {pool_alpha!r}")
    if f_test not in ("msa", "random"):
        raise QualityInputError(f"f_test: expected 'msa' or 'random', got {f_test!r}")
    study = BalancedStudy.from_readings(readings)
    ss = sums_of_squares(study)
    if ss.total == 0.0:
        raise QualityInputError(
            "readings: every value is the same, so the study shows no variation to split; "
            "record the values at a finer resolution"
        )
    full = anova_with_interaction(ss, f_test)
    additive = anova_pooled(ss)
    p_inter = full.row(INTERACTION).p
    pooled = pool_alpha is not None and p_inter is not None and p_inter > pool_alpha
    table = additive if pooled else full
    components = _components(table, ss.n_parts, ss.n_operators, ss.n_trials, pooled)
    return GrrResult(full, additive, pooled, components, multiplier, tolerance)
