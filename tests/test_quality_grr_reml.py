"""Variance components of the gauge study against an independent estimator: REML.

For balanced data, the REML estimates of the variance components equal the ANOVA estimates
whenever those are all positive (Searle, Casella and McCulloch, Variance Components, Wiley 1992;
from memory). statsmodels' MixedLM fits the crossed random-effects model by numerical
optimisation, so the agreement is checked to the optimiser's tolerance, not to the last digit.
"""

from __future__ import annotations

import random
import warnings

import pandas as pd
import pytest
import statsmodels.formula.api as smf

from heft.daemon.quality.grr import gauge_rr
from heft.daemon.quality.grr_anova import GaugeReading


def _study(seed: int) -> list[GaugeReading]:
    rng = random.Random(seed)
    part = [rng.gauss(0, 2) for _ in range(10)]
    operator = [rng.gauss(0, 0.4) for _ in range(3)]
    rows = []
    for i in range(10):
        for j in range(3):
            inter = rng.gauss(0, 0.3)
            for t in (1, 2, 3):
                value = 50 + part[i] + operator[j] + inter + rng.gauss(0, 0.2)
                rows.append(GaugeReading(f"P{i}", f"O{j}", t, value))
    return rows


@pytest.mark.parametrize("seed", [5, 11])
def test_anova_components_equal_reml_on_balanced_data(seed: int) -> None:
    rows = _study(seed)
    ours = gauge_rr(rows, pool_alpha=None).components
    assert ours.clamped == ()  # the equality needs every ANOVA estimate positive
    frame = pd.DataFrame(rows, columns=["part", "operator", "trial", "value"]).assign(group=1)
    vc = {"part": "0 + C(part)", "operator": "0 + C(operator)", "po": "0 + C(part):C(operator)"}
    model = smf.mixedlm("value ~ 1", frame, groups="group", re_formula="0", vc_formula=vc)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # convergence chatter from the optimiser
        fit = model.fit(reml=True, method=["lbfgs"], gtol=1e-12)
    reml = dict(zip(model.exog_vc.names, fit.vcomp, strict=True))
    assert ours.part == pytest.approx(reml["part"], rel=1e-3)
    assert ours.operator == pytest.approx(reml["operator"], rel=1e-3)
    assert ours.interaction == pytest.approx(reml["po"], rel=1e-3)
    assert ours.repeatability == pytest.approx(fit.scale, rel=1e-3)
