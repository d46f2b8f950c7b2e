"""``heft study grr``'s outputs: the printed report, the JSON figures and the raw CSV table."""

from __future__ import annotations

import csv
import math
from collections.abc import Sequence
from pathlib import Path
from typing import Any

from heft.daemon.quality.grr import GrrResult
from heft.daemon.quality.grr_anova import AnovaTable, GaugeReading

# (key for GrrResult.sigma, label); reproducibility's two parts are indented under it.
COMPONENTS: tuple[tuple[str, str], ...] = (
    ("ev", "repeatability (EV)"),
    ("av", "reproducibility (AV)"),
    ("operator", "  operator"),
    ("interaction", "  part x operator"),
    ("grr", "gauge R&R (GRR)"),
    ("pv", "part variation (PV)"),
    ("tv", "total variation (TV)"),
)
CSV_FIELDS = ("club", "operator", "trial", "value")


def _num(value: float | None, digits: int = 4) -> str:
    if value is None:
        return "-"
    if math.isinf(value):
        return "inf"
    return (
        f"{value:.{digits}g}"
        if abs(value) >= 1e4 or 0 < abs(value) < 1e-3
        else (f"{value:.{digits}f}")
    )


def _finite(value: float | None) -> float | None:
    """JSON has no inf or nan: such a figure is written as null."""
    return value if value is not None and math.isfinite(value) else None


def anova_lines(title: str, table: AnovaTable) -> list[str]:
    lines = [title, f"  {'source':<16}{'df':>5}{'SS':>12}{'MS':>12}{'F':>10}{'p':>9}"]
    for row in table.rows:
        lines.append(
            f"  {row.source:<16}{row.df:>5}{_num(row.ss):>12}{_num(row.ms):>12}"
            f"{_num(row.f, 3):>10}{_num(row.p, 3):>9}"
        )
    return lines


def report_lines(result: GrrResult, header: str, unit: str) -> list[str]:
    lines = [header, ""]
    lines += anova_lines("ANOVA with the part x operator interaction", result.with_interaction)
    p_inter = result.with_interaction.row("part x operator").p
    if result.pooled:
        lines += [
            "",
            f"  interaction p = {_num(p_inter, 3)}: not significant, pooled into repeatability",
            "  (the MSA manual's convention: pool when p is above 0.25)",
            "",
        ]
        lines += anova_lines("ANOVA without the interaction (pooled)", result.pooled_table)
    else:
        lines += ["", f"  interaction p = {_num(p_inter, 3)}: kept (p at or below 0.25)"]
    c = result.components
    variances = {
        "ev": c.repeatability,
        "av": c.reproducibility,
        "operator": c.operator,
        "interaction": c.interaction,
        "grr": c.grr,
        "pv": c.part,
        "tv": c.total,
    }
    tol = result.tolerance
    lines += [
        "",
        f"Variance components ({unit}; study variation = {result.multiplier:g} sd)",
        f"  {'source':<24}{'variance':>11}{'sd':>9}{'study var':>11}{'% contrib':>11}"
        f"{'% of TV':>9}{'% of tol':>10}",
    ]
    for key, label in COMPONENTS:
        share = 100.0 * variances[key] / c.total if c.total > 0 else math.nan
        lines.append(
            f"  {label:<24}{_num(variances[key]):>11}{_num(result.sigma(key)):>9}"
            f"{_num(result.study_variation(key)):>11}{_num(share, 3):>11}"
            f"{_num(result.percent_of_total(key), 3):>9}"
            f"{_num(result.percent_of_tolerance(key), 3):>10}"
        )
    if c.clamped:
        lines.append(f"  came out negative, set to zero: {', '.join(c.clamped)}")
    ndc = result.ndc
    lines += [
        "",
        f"ndc (number of distinct categories): {'-' if ndc is None else ndc}"
        f" ({'adequate' if result.ndc_adequate else 'too few'}: 5 or more wanted)",
    ]
    lines.append(
        f"%GRR of total variation: {result.percent_of_total('grr'):.1f} % - "
        f"{result.verdict_of_total.value}"
    )
    pct_tol, verdict_tol = result.percent_of_tolerance("grr"), result.verdict_of_tolerance
    if pct_tol is None or verdict_tol is None or tol is None:
        lines.append("%GRR of tolerance: - (no tolerance)")
    else:
        lines.append(f"%GRR of tolerance ({tol:g} {unit}): {pct_tol:.1f} % - {verdict_tol.value}")
    lines.append(
        "(MSA manual bands: under 10 % acceptable, 10 % to 30 % may be acceptable "
        "depending on the application, over 30 % unacceptable)"
    )
    return lines


def _table_json(table: AnovaTable) -> list[dict[str, Any]]:
    return [
        {
            "source": r.source,
            "df": r.df,
            "ss": r.ss,
            "ms": r.ms,
            "f": _finite(r.f),
            "p": _finite(r.p),
        }
        for r in table.rows
    ]


def figures_json(result: GrrResult, study: dict[str, Any]) -> dict[str, Any]:
    c = result.components
    keys = [key for key, _ in COMPONENTS]
    verdict_tol = result.verdict_of_tolerance
    return {
        "study": study,
        "anova": {
            "with_interaction": _table_json(result.with_interaction),
            "pooled": _table_json(result.pooled_table),
        },
        "pooled": result.pooled,
        "variance": {
            "repeatability": c.repeatability,
            "reproducibility": c.reproducibility,
            "operator": c.operator,
            "interaction": c.interaction,
            "grr": c.grr,
            "part": c.part,
            "total": c.total,
        },
        "clamped": list(c.clamped),
        "sigma": {key: result.sigma(key) for key in keys},
        "study_variation": {key: result.study_variation(key) for key in keys},
        "percent_of_total": {key: _finite(result.percent_of_total(key)) for key in keys},
        "percent_of_tolerance": {key: result.percent_of_tolerance(key) for key in keys},
        "multiplier": result.multiplier,
        "tolerance": result.tolerance,
        "ndc": result.ndc,
        "ndc_adequate": result.ndc_adequate,
        "verdict_of_total": result.verdict_of_total.value,
        "verdict_of_tolerance": None if verdict_tol is None else verdict_tol.value,
    }


def write_csv(path: Path, readings: Sequence[GaugeReading]) -> None:
    """The raw table, in the order measured: club, operator, trial, value."""
    with path.open("w", encoding="utf-8", newline="") as handle:
        writer = csv.writer(handle)
        writer.writerow(CSV_FIELDS)
        for r in readings:
            writer.writerow((r.part, r.operator, r.trial, repr(r.value)))
