"""The gauge study's ANOVA table against statsmodels and against R's published output.

Reference library: statsmodels (ols + anova_lm, typ=2; on a balanced design type II equals the
sequential table) and scipy.stats for the F tail. Published check: the kidney data set (two
factors crossed, 10 replicates per cell, balanced) that statsmodels ships in its test suite
with R's anova() output recorded beside it (statsmodels/stats/tests/test_anova.py,
TestAnovaLM.test_results).
"""

from __future__ import annotations

import math
import random
from typing import Any

import pandas as pd
import pytest
from scipy import stats
from statsmodels.formula.api import ols
from statsmodels.stats.anova import anova_lm

from heft.daemon.quality.grr import gauge_rr
from heft.daemon.quality.grr_anova import (
    INTERACTION,
    OPERATOR,
    PART,
    REPEATABILITY,
    AnovaTable,
    GaugeReading,
)
from heft.daemon.quality.inputs import QualityInputError

REL = 1e-9


def _random_study(seed: int, n: int, k: int, r: int) -> list[GaugeReading]:
    rng = random.Random(seed)
    part_effect = [rng.gauss(0, rng.uniform(0.1, 3)) for _ in range(n)]
    op_effect = [rng.gauss(0, rng.uniform(0.0, 0.5)) for _ in range(k)]
    inter_sd, rep_sd = rng.uniform(0, 0.3), rng.uniform(0.05, 0.5)
    rows = []
    for i in range(n):
        for j in range(k):
            inter = rng.gauss(0, inter_sd)
            for t in range(1, r + 1):
                value = 100 + part_effect[i] + op_effect[j] + inter + rng.gauss(0, rep_sd)
                rows.append(GaugeReading(f"P{i}", f"O{j}", t, value))
    rng.shuffle(rows)  # the table's row order must not matter
    return rows


def _statsmodels(rows: list[GaugeReading], formula: str) -> Any:
    frame = pd.DataFrame(rows, columns=["part", "operator", "trial", "value"])
    return anova_lm(ols(formula, data=frame).fit(), typ=2)


def _assert_row(table: AnovaTable, source: str, ref: Any, name: str, f: bool = True) -> None:
    row = table.row(source)
    assert row.df == ref.loc[name, "df"]
    assert row.ss == pytest.approx(ref.loc[name, "sum_sq"], rel=REL)
    if f:
        assert row.f == pytest.approx(ref.loc[name, "F"], rel=REL)
        assert row.p == pytest.approx(ref.loc[name, "PR(>F)"], rel=REL)


SHAPES = [(10, 3, 3), (5, 2, 2), (20, 3, 2), (4, 4, 5), (7, 2, 3), (3, 5, 2)]


@pytest.mark.parametrize("seed", range(8))
def test_anova_with_interaction_matches_statsmodels(seed: int) -> None:
    rows = _random_study(seed, *SHAPES[seed % len(SHAPES)])
    ref = _statsmodels(rows, "value ~ C(part) * C(operator)")
    table = gauge_rr(rows, pool_alpha=None).with_interaction
    _assert_row(table, PART, ref, "C(part)")
    _assert_row(table, OPERATOR, ref, "C(operator)")
    _assert_row(table, INTERACTION, ref, "C(part):C(operator)")
    _assert_row(table, REPEATABILITY, ref, "Residual", f=False)


@pytest.mark.parametrize("seed", range(8))
def test_pooled_table_matches_statsmodels_additive_model(seed: int) -> None:
    rows = _random_study(100 + seed, *SHAPES[seed % len(SHAPES)])
    ref = _statsmodels(rows, "value ~ C(part) + C(operator)")
    table = gauge_rr(rows).pooled_table
    _assert_row(table, PART, ref, "C(part)")
    _assert_row(table, OPERATOR, ref, "C(operator)")
    _assert_row(table, REPEATABILITY, ref, "Residual", f=False)


@pytest.mark.parametrize("seed", range(4))
def test_random_model_tests_main_effects_against_the_interaction(seed: int) -> None:
    # Expected mean squares of the two-factor random model (Montgomery, Design and Analysis of
    # Experiments): part and operator over MS(part x operator); the F tail from scipy.stats.
    rows = _random_study(200 + seed, 10, 3, 2)
    ref = _statsmodels(rows, "value ~ C(part) * C(operator)")
    table = gauge_rr(rows, f_test="random").with_interaction
    ms_inter = ref.loc["C(part):C(operator)", "sum_sq"] / ref.loc["C(part):C(operator)", "df"]
    for source, name in ((PART, "C(part)"), (OPERATOR, "C(operator)")):
        ms = ref.loc[name, "sum_sq"] / ref.loc[name, "df"]
        df_den = ref.loc["C(part):C(operator)", "df"]
        assert table.row(source).f == pytest.approx(ms / ms_inter, rel=REL)
        assert table.row(source).p == pytest.approx(
            stats.f.sf(ms / ms_inter, ref.loc[name, "df"], df_den), rel=REL
        )


def _kidney_rows() -> list[GaugeReading]:
    from statsmodels.stats.tests.test_anova import kidney_table

    rows: list[GaugeReading] = []
    counter: dict[tuple[int, int], int] = {}
    for days, duration, weight, _id in kidney_table.itertuples(index=False):
        key = (int(weight), int(duration))
        counter[key] = counter.get(key, 0) + 1
        rows.append(GaugeReading(key[0], key[1], counter[key], math.log(days + 1)))
    return rows


def test_published_r_anova_of_the_kidney_data() -> None:
    # R's anova() of log(Days+1) ~ Duration * Weight, as recorded in statsmodels'
    # stats/tests/test_anova.py (TestAnovaLM.test_results): Weight plays the part, Duration the
    # operator, the 10 patients per cell the trials. Tolerances: half the last printed digit.
    table = gauge_rr(_kidney_rows(), pool_alpha=None).with_interaction
    expected = {
        OPERATOR: (1, 2.339693, 4.358293, 0.0415617),
        PART: (2, 16.97129, 15.80674, 3.944502e-06),
        INTERACTION: (2, 0.6356584, 0.5920404, 0.5567479),
    }
    for source, (df, ss, f, p) in expected.items():
        row = table.row(source)
        assert row.df == df
        assert row.ss == pytest.approx(ss, rel=6e-7)
        assert row.f == pytest.approx(f, rel=6e-7)
        assert row.p == pytest.approx(p, rel=6e-7)
    assert table.row(REPEATABILITY).df == 54
    assert table.row(REPEATABILITY).ss == pytest.approx(28.9892, abs=5e-5)


def test_interaction_pooled_only_when_not_significant() -> None:
    rows = _kidney_rows()  # interaction p = 0.557 (R, above)
    assert gauge_rr(rows).pooled
    assert not gauge_rr(rows, pool_alpha=0.6).pooled
    assert not gauge_rr(rows, pool_alpha=None).pooled


def _rows(cells: dict[tuple[str, str], list[float]]) -> list[GaugeReading]:
    return [
        GaugeReading(p, o, t, v)
        for (p, o), values in cells.items()
        for t, v in enumerate(values, start=1)
    ]


BALANCED = {
    ("1", "A"): [1.0, 1.1], ("1", "B"): [1.2, 1.0],
    ("2", "A"): [2.0, 2.2], ("2", "B"): [2.1, 2.1],
}  # fmt: skip


@pytest.mark.parametrize(
    ("rows", "message"),
    [
        (_rows({k: v for k, v in BALANCED.items() if k != ("2", "B")}), "balanced"),
        (_rows({**BALANCED, ("2", "B"): [2.1]}), "balanced"),
        ([*_rows(BALANCED), GaugeReading("1", "A", 1, 1.0)], "recorded twice"),
        ([r._replace(value=float("nan")) if r.trial == 2 else r for r in _rows(BALANCED)],
         "finite"),
        ([r for r in _rows(BALANCED) if r.operator == "A"], "at least 2 parts and 2 operators"),
        (_rows({k: v[:1] for k, v in BALANCED.items()}), "at least 2 trials"),
        ([r._replace(trial=1.5) for r in _rows(BALANCED)], "whole number"),
        ([(r.part, r.operator, r.value) for r in _rows(BALANCED)], "expected \\(part"),
        ([r._replace(part=["1"]) for r in _rows(BALANCED)], "labels"),
        ([r._replace(value=5.0) for r in _rows(BALANCED)], "no variation"),
    ],
)  # fmt: skip
def test_bad_studies_are_refused_with_a_clear_message(
    rows: list[GaugeReading], message: str
) -> None:
    with pytest.raises(QualityInputError, match=message):
        gauge_rr(rows)


def test_bad_parameters_are_refused() -> None:
    rows = _rows(BALANCED)
    with pytest.raises(QualityInputError, match="tolerance"):
        gauge_rr(rows, tolerance=0)
    with pytest.raises(QualityInputError, match="pool_alpha"):
        gauge_rr(rows, pool_alpha=1.5)
    with pytest.raises(QualityInputError, match="f_test"):
        gauge_rr(rows, f_test="fixed")  # type: ignore[arg-type]
