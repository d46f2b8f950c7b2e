"""``heft study grr``: a gauge R&R study on the simulated bench, checked against statsmodels.

Reference library: statsmodels (ols + anova_lm, typ=2; on a balanced design type II equals the
sequential table) recomputes the ANOVA from the CSV the command writes. The variance
components are then formed from statsmodels' mean squares by the ANOVA method of the AIAG
Measurement Systems Analysis reference manual, 4th edition (from memory; the same formulas as
Montgomery, Introduction to Statistical Quality Control):

    EV = MS_e;  interaction = (MS_PO - MS_e) / r;  operator = (MS_O - MS_PO) / (n r);
    PV = (MS_P - MS_PO) / (k r)   (negatives set to zero; pooled: MS_PO -> pooled MS_e)
"""

from __future__ import annotations

import json
import math
import subprocess
import sys
from pathlib import Path
from typing import Any

import pandas as pd
import pytest
from statsmodels.formula.api import ols
from statsmodels.stats.anova import anova_lm

from heft.daemon.quality.grr import gauge_rr
from heft.daemon.quality.grr_plan import study_plan
from heft.daemon.quality_study import (
    StudyRunError,
    larkspur_study_clubs,
    match_captures,
    run_study,
    simulated_operators,
)
from heft.drivers.sim.physics import Club, Placement
from heft.tui.cli import main

N, K, R = 5, 3, 2
REL = 1e-9


def _heft(*argv: str) -> subprocess.CompletedProcess[str]:
    return subprocess.run(
        [sys.executable, "-m", "heft.tui.cli", "study", "grr", *argv],
        capture_output=True, text=True, timeout=120, check=False,
    )  # fmt: skip


def _anova(frame: pd.DataFrame, formula: str) -> Any:
    return anova_lm(ols(formula, data=frame).fit(), typ=2)


def _ms(table: Any, name: str) -> float:
    return float(table.loc[name, "sum_sq"] / table.loc[name, "df"])


@pytest.fixture(scope="module")
def study_run(tmp_path_factory: pytest.TempPathFactory) -> tuple[dict[str, Any], pd.DataFrame]:
    csv = tmp_path_factory.mktemp("study") / "grr.csv"
    done = _heft(
        "--clubs", str(N), "--operators", str(K), "--trials", str(R), "--seed", "7",
        "--json", "--csv", str(csv),
    )  # fmt: skip
    assert done.returncode == 0, done.stderr
    frame = pd.read_csv(csv, dtype={"club": str, "operator": str})
    return json.loads(done.stdout), frame.rename(columns={"club": "part"})


def test_the_csv_holds_every_placement_of_the_crossed_study(
    study_run: tuple[dict[str, Any], pd.DataFrame],
) -> None:
    figures, frame = study_run
    assert list(frame.columns) == ["part", "operator", "trial", "value"]
    assert len(frame) == N * K * R
    counts = frame.groupby(["part", "operator"])["trial"].nunique()
    assert len(counts) == N * K and set(counts) == {R}
    assert figures["study"] == {
        "clubs": N, "operators": K, "trials": R, "seed": 7, "quantity": "swingweight",
        "unit": "points", "bench": "simulated",
    }  # fmt: skip
    # Captured, not drawn identically: repeat placements of one club by one operator differ.
    spread = frame.groupby(["part", "operator"])["value"].agg(lambda v: v.max() - v.min())
    assert (spread > 0).all()


def test_sums_of_squares_and_f_match_statsmodels(
    study_run: tuple[dict[str, Any], pd.DataFrame],
) -> None:
    figures, frame = study_run
    ref = _anova(frame, "value ~ C(part) * C(operator)")
    rows = {row["source"]: row for row in figures["anova"]["with_interaction"]}
    names = {"part": "C(part)", "operator": "C(operator)", "part x operator": "C(part):C(operator)"}
    for source, name in names.items():
        assert rows[source]["df"] == ref.loc[name, "df"]
        assert rows[source]["ss"] == pytest.approx(ref.loc[name, "sum_sq"], rel=REL)
        assert rows[source]["f"] == pytest.approx(ref.loc[name, "F"], rel=REL)
        assert rows[source]["p"] == pytest.approx(ref.loc[name, "PR(>F)"], rel=1e-6)
    assert rows["repeatability"]["ss"] == pytest.approx(ref.loc["Residual", "sum_sq"], rel=REL)
    additive = _anova(frame, "value ~ C(part) + C(operator)")
    pooled = {row["source"]: row for row in figures["anova"]["pooled"]}
    assert pooled["repeatability"]["ss"] == pytest.approx(
        additive.loc["Residual", "sum_sq"], rel=REL
    )
    assert pooled["operator"]["f"] == pytest.approx(additive.loc["C(operator)", "F"], rel=REL)


def test_variance_components_match_the_msa_formulas_on_statsmodels_mean_squares(
    study_run: tuple[dict[str, Any], pd.DataFrame],
) -> None:
    figures, frame = study_run
    full = _anova(frame, "value ~ C(part) * C(operator)")
    pooled = full.loc["C(part):C(operator)", "PR(>F)"] > 0.25  # the MSA manual's pooling rule
    assert figures["pooled"] is bool(pooled)
    if pooled:
        additive = _anova(frame, "value ~ C(part) + C(operator)")
        ms_e = ms_po = _ms(additive, "Residual")
        inter = 0.0
    else:
        ms_e, ms_po = _ms(full, "Residual"), _ms(full, "C(part):C(operator)")
        inter = max(0.0, (ms_po - ms_e) / R)
    operator = max(0.0, (_ms(full, "C(operator)") - ms_po) / (N * R))
    part = max(0.0, (_ms(full, "C(part)") - ms_po) / (K * R))
    var = figures["variance"]
    assert var["repeatability"] == pytest.approx(ms_e, rel=REL)
    assert var["interaction"] == pytest.approx(inter, rel=REL, abs=1e-12)
    assert var["operator"] == pytest.approx(operator, rel=REL, abs=1e-12)
    assert var["part"] == pytest.approx(part, rel=REL)
    grr, total = ms_e + inter + operator, ms_e + inter + operator + part
    assert figures["percent_of_total"]["grr"] == pytest.approx(
        100 * math.sqrt(grr / total), rel=REL
    )
    # ndc = 1.41 PV / GRR truncated (MSA manual); tolerance = the spec's D2 +/- 1.5 band, 3 points
    assert figures["ndc"] == math.floor(1.41 * math.sqrt(part / grr))
    assert figures["tolerance"] == 3.0
    assert figures["percent_of_tolerance"]["grr"] == pytest.approx(
        100 * 6 * math.sqrt(grr) / 3.0, rel=REL
    )


def _study(scatter_in: float) -> Any:
    plan = study_plan(N, K, R, seed=11, part_noun="club")
    clubs = larkspur_study_clubs(plan.parts, 11)
    operators = simulated_operators(plan.operators, 11, scatter_in=scatter_in)
    trials, _ = run_study(plan, clubs, operators, seed=11)
    return trials, gauge_rr([t.reading("swingweight") for t in trials], pool_alpha=None)


def test_operators_with_more_scatter_give_more_repeatability_and_reproducibility() -> None:
    steady_trials, steady = _study(0.005)
    _, shaky = _study(0.05)
    assert shaky.sigma("ev") > 2 * steady.sigma("ev")
    assert shaky.sigma("av") > 2 * steady.sigma("av")
    assert shaky.sigma("pv") == pytest.approx(steady.sigma("pv"), rel=0.1)  # same clubs
    # Each value is what the pipeline captured of that placement: the simulator's own statics
    # (its ground truth) for the club as laid, within the capture's few hundredths of a gram.
    for trial in steady_trials:
        m, club = trial.measurement, trial.placement.club
        assert m.total_weight_g == pytest.approx(club.total_weight_g, abs=0.1)
        assert m.balance_point_in == pytest.approx(club.balance_point_in, abs=0.005)


def test_verbose_prints_each_step_in_the_plan_order(capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["study", "grr", "--clubs", "2", "--operators", "2", "--trials", "2",
                 "--seed", "4", "--verbose"]) == 0  # fmt: skip
    out = capsys.readouterr().out
    steps = [line for line in out.splitlines() if line.startswith("next: ")]
    plan = study_plan(2, 2, 2, seed=4, part_noun="club")
    assert [s.split(":")[1].strip() for s in steps] == [s.describe("club") for s in plan.steps]
    assert "%GRR of total variation" in out and "ndc" in out


@pytest.mark.parametrize(
    ("argv", "option"),
    [
        (["--clubs", "1"], "--clubs"),
        (["--clubs", "ten"], "--clubs"),
        (["--operators", "27"], "--operators"),
        (["--trials", "1"], "--trials"),
        (["--quantity", "length"], "--quantity"),
        (["--tolerance-points", "0"], "--tolerance-points"),
        (["--tolerance-points", "nan"], "--tolerance-points"),
        (["--quantity", "weight", "--tolerance-points", "2"], "--tolerance-points"),
        (["--tolerance-g", "5"], "--tolerance-g"),
        (["--seed", "x"], "--seed"),
    ],
)
def test_bad_options_are_refused_naming_the_option(
    argv: list[str], option: str, capsys: pytest.CaptureFixture[str]
) -> None:
    with pytest.raises(SystemExit) as exit_info:
        main(["study", "grr", *argv])
    assert exit_info.value.code == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert f"argument {option}" in err[-1]


def test_an_unwritable_csv_is_refused(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    target = tmp_path / "missing" / "grr.csv"
    code = main(["study", "grr", "--clubs", "2", "--operators", "2", "--trials", "2",
                 "--csv", str(target)])  # fmt: skip
    assert code == 2
    assert "--csv" in capsys.readouterr().err
    assert not target.exists()


def test_a_placement_without_exactly_one_capture_stops_the_study_naming_the_step() -> None:
    plan = study_plan(2, 2, 2, seed=1, part_noun="club")
    club = Club(total_weight_g=400.0, balance_point_in=29.0)
    placements = [Placement(club, 5.0 * i, 5.0 * i + 3.0) for i in range(len(plan.steps))]
    with pytest.raises(StudyRunError, match=rf"^{plan.steps[0].describe('club')}: .* got 0$"):
        match_captures(plan, placements, [])
