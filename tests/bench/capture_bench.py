"""Capture benchmark: heft's engine against the obvious rule and against the limit.

Run: ``.venv/bin/python -m tests.bench.capture_bench`` (``--per-rig N``, ``--seed S``, ``--json``).

A seeded corpus (``tests.bench.capture_corpus``) of placements on six rigs is fed, sample by
sample, to (a) the obvious rule (``tests.bench.naive_capture``), (b) ``daemon.capture``'s engine,
and compared with (c) the limit from the ground truth. Per placement: time from the club touching
the supports to capture, error of the captured total weight and swing weight (two-support statics,
``daemon.physics``), false captures (swing weight off by more than 0.25 point), double captures
and misses. Everything runs in virtual time; the figures do not depend on the machine's speed.
"""

from __future__ import annotations

import argparse
import json
import math
import statistics
import sys
from collections.abc import Sequence
from dataclasses import asdict, dataclass, field

from heft.daemon.capture import Captured, CaptureEngine
from heft.daemon.capture_params import CaptureParams
from heft.daemon.physics.statics import two_support_statics
from heft.daemon.physics.swingweight import points_from_moment_g_in
from tests.bench.capture_corpus import (
    CHANNELS,
    RIGS,
    SUPPORT_A_IN,
    SUPPORT_B_IN,
    RigSpec,
    Session,
    Truth,
    build_session,
)
from tests.bench.naive_capture import NaiveRule

FALSE_CAPTURE_POINTS = 0.25  # a capture off by more than this is a false capture
TARGET_VS_LIMIT = 1.3  # (b) median <= 1.3 x (c)
TARGET_VS_NAIVE = 0.6  # (b) median <= 0.6 x (a)
TARGET_RMS_POINTS = 0.1  # RMS swing-weight error where the display step is 0.1 g or finer


def swingweight_points(f_a_g: float, f_b_g: float) -> float:
    statics = two_support_statics(f_a_g, SUPPORT_A_IN, f_b_g, SUPPORT_B_IN)
    return points_from_moment_g_in(statics.moment_g_in)


@dataclass
class Outcome:
    """One placement as one method handled it."""

    rig: str
    index: int
    time_s: float  # touch to capture; inf for a miss
    captures: int
    weight_err_g: float | None = None
    points_err: float | None = None


@dataclass
class RowStats:
    label: str
    n: int
    median_s: float
    p95_s: float
    misses: int
    doubles: int
    false_captures: int
    rms_points: float
    max_points: float
    rms_weight_g: float
    outcomes: list[Outcome] = field(default_factory=list, repr=False)


def _score(
    rig: RigSpec, truths: list[Truth], caps: list[tuple[float, dict[str, float]]], label: str
) -> tuple[list[Outcome], int]:
    """Assign captures to placements; returns outcomes and the number of stray captures."""
    outcomes: list[Outcome] = []
    stray = 0
    used = 0
    for tr in truths:
        mine = [c for c in caps if tr.t_on_s <= c[0] <= tr.t_off_s + 0.2]
        used += len(mine)
        if not mine:
            outcomes.append(Outcome(rig.name, tr.index, math.inf, 0))
            continue
        t, means = mine[0]
        true_pts = swingweight_points(tr.static_g[CHANNELS[0]], tr.static_g[CHANNELS[1]])
        pts = swingweight_points(means[CHANNELS[0]], means[CHANNELS[1]])
        outcomes.append(
            Outcome(
                rig.name,
                tr.index,
                t - tr.t_on_s,
                len(mine),
                sum(means.values()) - tr.club.total_weight_g,
                pts - true_pts,
            )
        )
    stray = len(caps) - used
    return outcomes, stray


def run_engine(session: Session) -> list[tuple[float, dict[str, float]]]:
    engine = CaptureEngine(CHANNELS, CaptureParams.preset(session.rig.preset))
    caps: list[tuple[float, dict[str, float]]] = []
    for t, ch, v, flags in session.samples:
        for out in engine.on_sample(ch, t, v, flags):
            if isinstance(out, Captured):
                caps.append((out.t_s, {c: w.mean_g for c, w in out.windows.items()}))
    return caps


def run_naive(session: Session) -> list[tuple[float, dict[str, float]]]:
    rule = NaiveRule(CHANNELS, session.rig.rate_hz, session.rig.division_g)
    caps: list[tuple[float, dict[str, float]]] = []
    for t, ch, v, _flags in session.samples:
        got = rule.on_sample(ch, t, v)
        if got is not None:
            caps.append((got.t_s, got.means_g))
    return caps


def _pct(values: Sequence[float], q: float) -> float:
    """Nearest-rank percentile (inf values stand for misses and sort last)."""
    s = sorted(values)
    if not s:
        return math.nan
    k = max(0, min(len(s) - 1, math.ceil(q * len(s)) - 1))
    return s[k]


def summarize(label: str, outcomes: list[Outcome], stray: int) -> RowStats:
    times = [o.time_s for o in outcomes]
    pts = [o.points_err for o in outcomes if o.points_err is not None]
    wts = [o.weight_err_g for o in outcomes if o.weight_err_g is not None]
    return RowStats(
        label=label,
        n=len(outcomes),
        median_s=statistics.median(times) if times else math.nan,
        p95_s=_pct(times, 0.95),
        misses=sum(1 for o in outcomes if o.captures == 0),
        doubles=sum(1 for o in outcomes if o.captures > 1),
        false_captures=sum(1 for p in pts if abs(p) > FALSE_CAPTURE_POINTS) + stray,
        rms_points=math.sqrt(statistics.fmean(p * p for p in pts)) if pts else math.nan,
        max_points=max((abs(p) for p in pts), default=math.nan),
        rms_weight_g=math.sqrt(statistics.fmean(w * w for w in wts)) if wts else math.nan,
        outcomes=outcomes,
    )


@dataclass
class BenchResult:
    per_rig: int
    seed: int
    rows: dict[str, RowStats]  # 'naive', 'engine', 'limit'
    by_rig: dict[str, dict[str, float]]  # rig -> median times and misses per row
    fine_rms_points: float  # engine RMS swing-weight error on rigs with d <= 0.1 g
    both_captured: tuple[int, float, float]  # placements (a) captured: count, medians (a), (b)


def run_bench(per_rig: int = 40, seed: int = 2026, rigs: Sequence[RigSpec] = RIGS) -> BenchResult:
    all_naive: list[Outcome] = []
    all_engine: list[Outcome] = []
    all_limit: list[Outcome] = []
    stray_naive = stray_engine = 0
    by_rig: dict[str, dict[str, float]] = {}
    for spec in rigs:
        session = build_session(spec, per_rig, seed)
        naive, s_n = _score(spec, session.truths, run_naive(session), "naive")
        engine, s_e = _score(spec, session.truths, run_engine(session), "engine")
        limit = [
            Outcome(
                spec.name,
                tr.index,
                (tr.t_limit_s - tr.t_on_s) if tr.t_limit_s is not None else math.inf,
                1,
            )
            for tr in session.truths
        ]
        stray_naive += s_n
        stray_engine += s_e
        all_naive += naive
        all_engine += engine
        all_limit += limit
        by_rig[spec.name] = {
            "naive_median_s": statistics.median(o.time_s for o in naive),
            "engine_median_s": statistics.median(o.time_s for o in engine),
            "limit_median_s": statistics.median(o.time_s for o in limit),
            "naive_misses": sum(1 for o in naive if o.captures == 0),
            "engine_misses": sum(1 for o in engine if o.captures == 0),
            "engine_rms_points": math.sqrt(
                statistics.fmean(o.points_err**2 for o in engine if o.points_err is not None)
            )
            if any(o.points_err is not None for o in engine)
            else math.nan,
        }
    fine = [
        o.points_err
        for o in all_engine
        if o.points_err is not None
        and next(r for r in rigs if r.name == o.rig).division_g <= 0.1 + 1e-12
    ]
    pairs = [(a, b) for a, b in zip(all_naive, all_engine, strict=True) if a.captures > 0]
    both = (
        len(pairs),
        statistics.median(a.time_s for a, _ in pairs) if pairs else math.nan,
        statistics.median(b.time_s for _, b in pairs) if pairs else math.nan,
    )
    return BenchResult(
        both_captured=both,
        per_rig=per_rig,
        seed=seed,
        rows={
            "naive": summarize("(a) obvious rule", all_naive, stray_naive),
            "engine": summarize("(b) heft engine", all_engine, stray_engine),
            "limit": summarize("(c) limit", all_limit, 0),
        },
        by_rig=by_rig,
        fine_rms_points=math.sqrt(statistics.fmean(p * p for p in fine)) if fine else math.nan,
    )


def _fmt_s(x: float) -> str:
    return "miss" if math.isinf(x) else f"{x:.2f}"


def _ratio(x: float, y: float) -> str:
    return "-" if math.isinf(y) else f"{x / y:.2f}"


def format_table(r: BenchResult) -> str:
    a, b, c = r.rows["naive"], r.rows["engine"], r.rows["limit"]
    lines = [
        f"capture benchmark: {a.n} placements ({r.per_rig} per rig x {len(r.by_rig)} rigs), "
        f"seed {r.seed}, virtual time",
        "",
        "| row | median s | p95 s | misses | doubles | false (>0.25 pt) "
        "| RMS SW pt | max SW pt | RMS W g |",
        "|---|---|---|---|---|---|---|---|---|",
    ]
    for row in (a, b):
        lines.append(
            f"| {row.label} | {_fmt_s(row.median_s)} | {_fmt_s(row.p95_s)} | {row.misses} "
            f"| {row.doubles} | {row.false_captures} | {row.rms_points:.3f} "
            f"| {row.max_points:.3f} | {row.rms_weight_g:.3f} |"
        )
    lines.append(
        f"| {c.label} | {_fmt_s(c.median_s)} | {_fmt_s(c.p95_s)} | - | - | - | - | - | - |"
    )
    ratio_bc = b.median_s / c.median_s
    ratio_ba = b.median_s / a.median_s
    p95_bc = b.p95_s / c.p95_s
    p95_ba = b.p95_s / a.p95_s
    lines += [
        "",
        f"(b)/(c) median {ratio_bc:.2f} (target <= {TARGET_VS_LIMIT}: "
        f"{'met' if ratio_bc <= TARGET_VS_LIMIT else 'MISSED'}); p95 {p95_bc:.2f}",
        f"(b)/(a) median {ratio_ba:.2f} (target <= {TARGET_VS_NAIVE}: "
        f"{'met' if ratio_ba <= TARGET_VS_NAIVE else 'MISSED'}); p95 "
        + ("n/a (a misses)" if math.isinf(a.p95_s) else f"{p95_ba:.2f}"),
        f"(b)/(a) on the {r.both_captured[0]} placements (a) captured at all: "
        f"{r.both_captured[2] / r.both_captured[1]:.2f} "
        f"(medians {r.both_captured[2]:.2f} s vs {r.both_captured[1]:.2f} s)",
        f"false captures beyond {FALSE_CAPTURE_POINTS} point: engine {b.false_captures} "
        f"(target 0: {'met' if b.false_captures == 0 else 'MISSED'})",
        f"RMS swing-weight error, engine, rigs with d <= 0.1 g: {r.fine_rms_points:.3f} point "
        f"(target <= {TARGET_RMS_POINTS}: "
        f"{'met' if r.fine_rms_points <= TARGET_RMS_POINTS else 'MISSED'})",
        "",
        "| rig | (a) median s | (b) median s | (c) median s | (b)/(c) | (b)/(a) | (a) misses "
        "| (b) misses | (b) RMS SW pt |",
        "|---|---|---|---|---|---|---|---|---|",
    ]
    for name, m in r.by_rig.items():
        lines.append(
            f"| {name} | {_fmt_s(m['naive_median_s'])} | {_fmt_s(m['engine_median_s'])} "
            f"| {_fmt_s(m['limit_median_s'])} "
            f"| {m['engine_median_s'] / m['limit_median_s']:.2f} "
            f"| {_ratio(m['engine_median_s'], m['naive_median_s'])} "
            f"| {int(m['naive_misses'])} | {int(m['engine_misses'])} "
            f"| {m['engine_rms_points']:.3f} |"
        )
    return "\n".join(lines)


def main(argv: Sequence[str] | None = None) -> int:
    ap = argparse.ArgumentParser(prog="python -m tests.bench.capture_bench", description=__doc__)
    ap.add_argument("--per-rig", type=int, default=40, help="placements per rig (default 40)")
    ap.add_argument("--seed", type=int, default=2026, help="corpus seed (default 2026)")
    ap.add_argument("--json", action="store_true", help="print the summary as JSON instead")
    args = ap.parse_args(argv)
    if args.per_rig < 1:
        ap.error("--per-rig must be a positive whole number")
    result = run_bench(args.per_rig, args.seed)
    if args.json:
        rows = {
            k: {f: v for f, v in asdict(row).items() if f != "outcomes"}
            for k, row in result.rows.items()
        }
        summary = {
            "rows": rows,
            "by_rig": result.by_rig,
            "seed": result.seed,
            "both_captured": result.both_captured,
            "fine_rms_points": result.fine_rms_points,
        }
        print(json.dumps(summary, indent=2))
    else:
        print(format_table(result))
    return 0


if __name__ == "__main__":
    sys.exit(main())
