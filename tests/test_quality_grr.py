"""Gauge R&R variance components, %GRR, ndc and verdicts; the study plan.

Formulas: AIAG MSA manual, 4th ed., ANOVA method (from memory; the same in Montgomery,
Introduction to Statistical Quality Control, gauge capability chapter). The small study below
is worked by hand in the comments, from the sums of squares of a balanced two-factor design.
"""

from __future__ import annotations

import math
from collections import Counter

import pytest
from scipy import stats

from heft.daemon.quality.grr import GrrVerdict, gauge_rr, grr_verdict
from heft.daemon.quality.grr_anova import INTERACTION, GaugeReading
from heft.daemon.quality.grr_plan import study_plan
from heft.daemon.quality.inputs import QualityInputError

# Parts 1, 2; operators A, B; two trials. Cell means 11, 13 / 20, 23; grand mean 16.75;
# part means 12, 21.5; operator means 15.5, 18.
# SS_part = 4 (4.75^2 + 4.75^2) = 180.5; SS_op = 4 (1.25^2 + 1.25^2) = 12.5;
# interaction residuals +-0.25 in every cell, SS_PO = 2 x 4 x 0.0625 = 0.5 (df 1);
# SS_e = (1 + 1) + 0 + 0 + (1 + 1) = 4 (df 4), MS_e = 1.
HAND = [
    GaugeReading("1", "A", 1, 10.0), GaugeReading("1", "A", 2, 12.0),
    GaugeReading("1", "B", 1, 13.0), GaugeReading("1", "B", 2, 13.0),
    GaugeReading("2", "A", 1, 20.0), GaugeReading("2", "A", 2, 20.0),
    GaugeReading("2", "B", 1, 22.0), GaugeReading("2", "B", 2, 24.0),
]  # fmt: skip


def test_hand_worked_study_with_interaction_kept() -> None:
    result = gauge_rr(HAND, pool_alpha=None)
    assert not result.pooled
    c = result.components
    assert c.repeatability == pytest.approx(1.0)  # MS_e
    assert c.interaction == 0.0  # (0.5 - 1) / 2 = -0.25, clamped
    assert c.clamped == ("interaction",)
    assert c.operator == pytest.approx((12.5 - 0.5) / 4)  # (MS_O - MS_PO) / (n r) = 3
    assert c.part == pytest.approx((180.5 - 0.5) / 4)  # (MS_P - MS_PO) / (k r) = 45


def test_hand_worked_study_pooled() -> None:
    result = gauge_rr(HAND, tolerance=40.0)
    # F_PO = 0.5 / 1 on (1, 4) df; its p-value (scipy.stats.f) is far above 0.25: pool.
    p_inter = result.with_interaction.row(INTERACTION).p
    assert p_inter == pytest.approx(stats.f.sf(0.5, 1, 4), rel=1e-9)
    assert result.pooled
    c = result.components
    ms_pool = (0.5 + 4.0) / 5  # (SS_PO + SS_e) / (df_PO + df_e) = 0.9
    assert c.repeatability == pytest.approx(ms_pool)
    assert c.interaction == 0.0 and c.clamped == ()
    assert c.operator == pytest.approx((12.5 - ms_pool) / 4)  # 2.9
    assert c.part == pytest.approx((180.5 - ms_pool) / 4)  # 44.9
    grr_var, tv_var = 0.9 + 2.9, 0.9 + 2.9 + 44.9
    assert result.sigma("grr") == pytest.approx(math.sqrt(grr_var))
    assert result.percent_of_total("grr") == pytest.approx(100 * math.sqrt(grr_var / tv_var))
    assert result.percent_of_total("grr") == pytest.approx(27.934, abs=5e-4)
    assert result.verdict_of_total is GrrVerdict.MARGINAL
    # % of tolerance: 100 x 6 sigma_GRR / tolerance = 100 x 6 x 1.9494 / 40 = 29.24 %
    assert result.percent_of_tolerance("grr") == pytest.approx(100 * 6 * math.sqrt(3.8) / 40)
    assert result.verdict_of_tolerance is GrrVerdict.MARGINAL
    # ndc = 1.41 x sqrt(44.9 / 3.8) = 4.847, truncated to 4: not adequate
    assert result.ndc == 4 and not result.ndc_adequate
    assert result.study_variation("ev") == pytest.approx(6 * math.sqrt(0.9))


def test_multiplier_5_15_changes_tolerance_figures_not_ratios() -> None:
    six, older = gauge_rr(HAND, tolerance=40.0), gauge_rr(HAND, tolerance=40.0, multiplier=5.15)
    assert older.percent_of_tolerance("grr") == pytest.approx(100 * 5.15 * math.sqrt(3.8) / 40)
    assert older.percent_of_total("grr") == pytest.approx(six.percent_of_total("grr"))


def test_perfect_gauge_has_no_grr_and_no_ndc() -> None:
    rows = [GaugeReading(p, o, t, float(p)) for p in (1, 2, 3) for o in "AB" for t in (1, 2)]
    result = gauge_rr(rows, tolerance=10.0)
    assert result.components.grr == 0.0
    assert result.ndc is None and result.ndc_adequate
    assert result.verdict_of_total is GrrVerdict.ACCEPTABLE
    assert result.percent_of_tolerance("grr") == 0.0


def test_no_tolerance_means_no_tolerance_figures() -> None:
    result = gauge_rr(HAND)
    assert result.percent_of_tolerance("grr") is None and result.verdict_of_tolerance is None


@pytest.mark.parametrize(
    ("percent", "verdict"),
    [(0.0, GrrVerdict.ACCEPTABLE), (9.999, GrrVerdict.ACCEPTABLE), (10.0, GrrVerdict.MARGINAL),
     (30.0, GrrVerdict.MARGINAL), (30.001, GrrVerdict.UNACCEPTABLE)],
)  # fmt: skip
def test_verdict_bands(percent: float, verdict: GrrVerdict) -> None:
    assert grr_verdict(percent) is verdict


def test_components_add_up() -> None:
    result = gauge_rr(HAND)
    c = result.components
    assert c.total == pytest.approx(c.repeatability + c.operator + c.interaction + c.part)
    pct = [result.percent_of_total(name) ** 2 for name in ("grr", "pv")]
    assert sum(pct) == pytest.approx(100.0**2)  # GRR^2 + PV^2 = TV^2


def test_plan_visits_every_cell_once_in_rounds_and_operator_blocks() -> None:
    plan = study_plan(10, 3, 2, seed=7)
    assert len(plan.steps) == 60
    assert Counter((s.trial, s.operator, s.part) for s in plan.steps).most_common(1)[0][1] == 1
    assert [s.trial for s in plan.steps] == sorted(s.trial for s in plan.steps)
    blocks = [(s.trial, s.operator) for s in plan.steps[::10]]
    assert blocks == [(t, o) for t in (1, 2) for o in "ABC"]
    orders = [tuple(s.part for s in plan.steps[i : i + 10]) for i in range(0, 60, 10)]
    assert all(sorted(o) == sorted(plan.parts) for o in orders)
    assert len(set(orders)) > 1  # fresh random order per block (6 shuffles of 10 parts)


def test_plan_is_reproducible_from_its_seed_and_walkable() -> None:
    plan = study_plan(["7", "8", "9"], ["Ann", "Bo"], 2, seed=3)
    assert plan == study_plan(["7", "8", "9"], ["Ann", "Bo"], 2, seed=3)
    first = plan.next_step(0)
    assert first is not None and first.operator == "Ann" and first.trial == 1
    assert plan.describe_next(0) == f"next: operator Ann, part {first.part}, trial 1"
    assert plan.describe_next(12) == "study complete" and plan.next_step(12) is None
    clubs = study_plan(["7", "8", "9"], ["Ann", "Bo"], 2, seed=3, part_noun="club")
    assert clubs.describe_next(0) == f"next: operator Ann, club {first.part}, trial 1"
    last = plan.next_step(11)
    assert last is not None and (last.operator, last.trial) == ("Bo", 2)


@pytest.mark.parametrize(
    ("args", "message"),
    [((1, 3, 2), "parts"), ((5, ["A", "A"], 2), "operators"), ((5, 2, 1), "trials"),
     ((5, "AB", 2), "operators")],
)  # fmt: skip
def test_plan_refuses_bad_sizes(args: tuple[object, object, int], message: str) -> None:
    with pytest.raises(QualityInputError, match=message):
        study_plan(*args)  # type: ignore[arg-type]
    with pytest.raises(QualityInputError, match="done"):
        study_plan(2, 2, 2).next_step(-1)
