"""Two-way crossed ANOVA of a gauge study: parts x operators x trials (balanced).

The sums of squares are the textbook ones for a balanced two-factor design with replication
(Montgomery, Design and Analysis of Experiments, the two-factor factorial; the AIAG MSA manual,
4th ed., Appendix A, gives the same table). With n parts, k operators and r trials:

    SS_part     = k r  sum_i (mean_i.. - mean)^2                      df = n - 1
    SS_operator = n r  sum_j (mean_.j. - mean)^2                      df = k - 1
    SS_inter    = r    sum_ij (mean_ij. - mean_i.. - mean_.j. + mean)^2   df = (n-1)(k-1)
    SS_repeat   =      sum_ijm (y_ijm - mean_ij.)^2                   df = n k (r - 1)

Two tables are always computed: the model with the part x operator interaction, and the additive
model where the interaction is pooled into repeatability (SS and df added). Which one the
variance components use is decided in ``heft.daemon.quality.grr``.

F ratios: ``f_test="msa"`` tests every effect against repeatability (the MSA manual's ANOVA table,
from memory, and what a fixed-effects ANOVA such as statsmodels' anova_lm reports);
``f_test="random"`` tests part and operator against the interaction, as the expected mean
squares of the random-effects model call for (Montgomery, Design and Analysis of Experiments,
two-factor random model). The interaction is tested against repeatability either way.
"""

from __future__ import annotations

import math
from collections import defaultdict
from collections.abc import Hashable, Iterable
from dataclasses import dataclass
from typing import Literal, NamedTuple

from heft.daemon.quality.distributions import f_sf
from heft.daemon.quality.inputs import QualityInputError, finite_number, mean

FTest = Literal["msa", "random"]

PART, OPERATOR, INTERACTION = "part", "operator", "part x operator"
REPEATABILITY, TOTAL = "repeatability", "total"


class GaugeReading(NamedTuple):
    """One row of the study's tidy table: this part, by this operator, on this trial."""

    part: Hashable
    operator: Hashable
    trial: int
    value: float


@dataclass(frozen=True, slots=True)
class BalancedStudy:
    """The readings arranged by cell; every (part, operator) cell holds the same trials."""

    parts: tuple[Hashable, ...]
    operators: tuple[Hashable, ...]
    trials: tuple[int, ...]
    cells: dict[tuple[Hashable, Hashable], tuple[float, ...]]  # in trial order

    @classmethod
    def from_readings(cls, readings: Iterable[GaugeReading]) -> BalancedStudy:
        by_cell: dict[tuple[Hashable, Hashable], dict[int, float]] = defaultdict(dict)
        parts: dict[Hashable, None] = {}
        operators: dict[Hashable, None] = {}
        for index, row in enumerate(readings):
            if not isinstance(row, tuple) or len(row) != 4:
                raise QualityInputError(
                    f"readings[{index}]: expected (part, operator, trial, value), got {row!r}"
                )
            part, operator, trial, value = row
            if not isinstance(part, Hashable) or not isinstance(operator, Hashable):
                raise QualityInputError(f"readings[{index}]: part and operator must be labels")
            where = f"readings[{index}] (part {part!r}, operator {operator!r}, trial {trial!r})"
            if isinstance(trial, bool) or not isinstance(trial, int):
                raise QualityInputError(f"{where}: trial must be a whole number")
            value = finite_number(f"{where} value", value)
            if trial in by_cell[(part, operator)]:
                raise QualityInputError(f"{where}: this trial is recorded twice")
            by_cell[(part, operator)][trial] = value
            parts.setdefault(part)
            operators.setdefault(operator)
        if len(parts) < 2 or len(operators) < 2:
            raise QualityInputError(
                f"readings: a crossed study needs at least 2 parts and 2 operators, got "
                f"{len(parts)} part(s) and {len(operators)} operator(s)"
            )
        first = next(iter(by_cell.values()))
        trials = tuple(sorted(first))
        if len(trials) < 2:
            raise QualityInputError("readings: each part needs at least 2 trials per operator")
        cells: dict[tuple[Hashable, Hashable], tuple[float, ...]] = {}
        for part in parts:
            for operator in operators:
                got = by_cell.get((part, operator), {})
                if tuple(sorted(got)) != trials:
                    raise QualityInputError(
                        f"readings: part {part!r} by operator {operator!r} has trials "
                        f"{sorted(got)}, expected {list(trials)} like every other cell "
                        "(the study must be balanced)"
                    )
                cells[(part, operator)] = tuple(got[t] for t in trials)
        return cls(tuple(parts), tuple(operators), trials, cells)


@dataclass(frozen=True, slots=True)
class AnovaRow:
    source: str
    df: int
    ss: float
    ms: float
    f: float | None  # None for the error and total rows
    p: float | None


@dataclass(frozen=True, slots=True)
class AnovaTable:
    rows: tuple[AnovaRow, ...]

    def row(self, source: str) -> AnovaRow:
        for row in self.rows:
            if row.source == source:
                return row
        raise KeyError(f"no ANOVA row {source!r}; rows are {[r.source for r in self.rows]}")


@dataclass(frozen=True, slots=True)
class SumsOfSquares:
    part: float
    operator: float
    interaction: float
    repeatability: float
    total: float
    n_parts: int
    n_operators: int
    n_trials: int


def sums_of_squares(study: BalancedStudy) -> SumsOfSquares:
    n, k, r = len(study.parts), len(study.operators), len(study.trials)
    cell_mean = {key: mean(values) for key, values in study.cells.items()}
    grand = mean(tuple(cell_mean.values()))
    part_mean = {p: mean(tuple(cell_mean[(p, o)] for o in study.operators)) for p in study.parts}
    op_mean = {o: mean(tuple(cell_mean[(p, o)] for p in study.parts)) for o in study.operators}
    ss_part = k * r * math.fsum((m - grand) ** 2 for m in part_mean.values())
    ss_op = n * r * math.fsum((m - grand) ** 2 for m in op_mean.values())
    ss_inter = r * math.fsum(
        (cell_mean[(p, o)] - part_mean[p] - op_mean[o] + grand) ** 2
        for p in study.parts
        for o in study.operators
    )
    ss_rep = math.fsum(
        (y - cell_mean[key]) ** 2 for key, values in study.cells.items() for y in values
    )
    ss_total = math.fsum((y - grand) ** 2 for values in study.cells.values() for y in values)
    return SumsOfSquares(ss_part, ss_op, ss_inter, ss_rep, ss_total, n, k, r)


def _ratio(numerator: float, denominator: float) -> float:
    if denominator > 0.0:
        return numerator / denominator
    return math.inf if numerator > 0.0 else math.nan


def _effect(source: str, df: int, ss: float, against: tuple[int, float]) -> AnovaRow:
    ms = ss / df
    df_den, ms_den = against
    f = _ratio(ms, ms_den)
    return AnovaRow(source, df, ss, ms, f, f_sf(f, df, df_den))


def anova_with_interaction(ss: SumsOfSquares, f_test: FTest = "msa") -> AnovaTable:
    n, k, r = ss.n_parts, ss.n_operators, ss.n_trials
    df_p, df_o, df_i, df_e = n - 1, k - 1, (n - 1) * (k - 1), n * k * (r - 1)
    error = (df_e, ss.repeatability / df_e)
    inter = _effect(INTERACTION, df_i, ss.interaction, error)
    main_against = (df_i, inter.ms) if f_test == "random" else error
    return AnovaTable((
        _effect(PART, df_p, ss.part, main_against),
        _effect(OPERATOR, df_o, ss.operator, main_against),
        inter,
        AnovaRow(REPEATABILITY, df_e, ss.repeatability, error[1], None, None),
        AnovaRow(TOTAL, n * k * r - 1, ss.total, ss.total / (n * k * r - 1), None, None),
    ))  # fmt: skip


def anova_pooled(ss: SumsOfSquares) -> AnovaTable:
    """The additive model: interaction SS and df pooled into repeatability."""
    n, k, r = ss.n_parts, ss.n_operators, ss.n_trials
    df_e = (n - 1) * (k - 1) + n * k * (r - 1)
    ss_e = ss.interaction + ss.repeatability
    error = (df_e, ss_e / df_e)
    return AnovaTable((
        _effect(PART, n - 1, ss.part, error),
        _effect(OPERATOR, k - 1, ss.operator, error),
        AnovaRow(REPEATABILITY, df_e, ss_e, error[1], None, None),
        AnovaRow(TOTAL, n * k * r - 1, ss.total, ss.total / (n * k * r - 1), None, None),
    ))  # fmt: skip
