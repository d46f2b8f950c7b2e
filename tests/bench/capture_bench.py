"""Capture benchmark: heft's engine against the limit the result needs and the obvious rule.

Run: ``.venv/bin/python -m tests.bench.capture_bench`` (``--per-rig N``, ``--seed S``, ``--json``).

A seeded corpus (``tests.bench.capture_corpus``) of placements on seven rigs is fed, sample by
sample, to (a) the obvious fixed-window rule (``tests.bench.naive_capture``: N readings within
+/-1 d) and (b) ``heft.daemon.capture``'s engine, and compared with (c) the *result* limit (the
earliest time the noise-free result stays within 0.1 swing-weight point and 0.5 g) and, for
reference, (d) the *display* limit (every channel settled to +/-1 d and averaged). Per placement:
time from the club touching the supports to capture, errors of the captured total weight and swing
weight (two-support statics, ``heft.daemon.physics``), false captures (swing weight off by more
than 0.25 point), double captures and misses. A miss counts only where the club stayed on the
supports past its result limit. Everything runs in virtual time: no figure depends on the machine.

Targets (issue: capture at the precision the result needs): median (b) at most 1.0 x (c) on every
rig; (b) at most 0.6 x (a) on the placements both capture; at most 5 % missed; 0 false, 0 double;
every capture within 0.1 point of the noise-free value.
"""

from __future__ import annotations

import argparse
import json
import math
import statistics
import sys
from collections.abc import Sequence
from dataclasses import asdict, dataclass, field
from typing import Protocol

from heft.daemon.capture import Captured, CaptureEngine
from heft.daemon.capture_params import CaptureParams
from tests.bench.capture_corpus import (
    CHANNELS,
    RIGS,
    SUPPORT_A_IN,
    SUPPORT_B_IN,
    SW_RESOLUTION_POINTS,
    RigSpec,
    Session,
    Truth,
    build_session,
    result_of,
)
from tests.bench.naive_capture import NaiveRule
from tests.bench.predict_capture import PredictRule

FALSE_CAPTURE_POINTS = 0.25  # a capture off by more than this is a false capture
TARGET_VS_LIMIT = 1.0  # (b) median <= 1.0 x (c), on every rig
TARGET_VS_NAIVE = 0.6  # (b) median <= 0.6 x (a), on the placements both capture
TARGET_MISSED = 0.05  # at most 5 % of the placements that stayed past their result limit
Capture = tuple[float, dict[str, float]]  # (time, mean grams per channel)


@dataclass
class Outcome:
    """One placement as one method handled it."""

    rig: str
    index: int
    expected: bool  # the club stayed on the supports past its result limit
    time_s: float  # touch to capture (or to the limit); inf for a miss
    captures: int
    weight_err_g: float | None = None
    points_err: float | None = None


def _score(truths: list[Truth], caps: list[Capture], rig: str) -> tuple[list[Outcome], int]:
    """Assign captures to placements; returns outcomes and the number of stray captures."""
    outcomes: list[Outcome] = []
    used = 0
    for tr in truths:
        mine = [c for c in caps if tr.t_on_s <= c[0] <= tr.t_off_s + 0.2]
        used += len(mine)
        expected = tr.t_result_s is not None
        if not mine:
            outcomes.append(Outcome(rig, tr.index, expected, math.inf, 0))
            continue
        t, means = mine[0]
        true_w_g, true_points = result_of(tr.static_g)
        w_g, points = result_of(means)
        outcomes.append(Outcome(rig, tr.index, expected, t - tr.t_on_s, len(mine),
                                w_g - true_w_g, points - true_points))  # fmt: skip
    return outcomes, len(caps) - used


def _limits(truths: list[Truth], rig: str, attr: str) -> list[Outcome]:
    return [
        Outcome(rig, tr.index, tr.t_result_s is not None,
                math.inf if (t := getattr(tr, attr)) is None else t - tr.t_on_s, 1)
        for tr in truths
    ]  # fmt: skip


def run_engine(session: Session) -> list[Capture]:
    engine = CaptureEngine(CHANNELS, CaptureParams.preset(session.rig.preset))
    caps: list[Capture] = []
    for t, ch, v, flags in session.samples:
        for out in engine.on_sample(ch, t, v, flags):
            if isinstance(out, Captured):
                caps.append((out.t_s, {c: w.mean_g for c, w in out.windows.items()}))
    return caps


class _Rule(Protocol):
    def on_sample(self, channel: str, t_s: float, value_g: float) -> _RuleCapture | None: ...


class _RuleCapture(Protocol):
    @property
    def t_s(self) -> float: ...
    @property
    def means_g(self) -> dict[str, float]: ...


def _run_rule(session: Session, rule: _Rule) -> list[Capture]:
    caps: list[Capture] = []
    for t, ch, v, _flags in session.samples:
        got = rule.on_sample(ch, t, v)
        if got is not None:
            caps.append((got.t_s, got.means_g))
    return caps


def run_naive(session: Session) -> list[Capture]:
    return _run_rule(session, NaiveRule(CHANNELS, session.rig.rate_hz, session.rig.division_g))


def run_predict(session: Session) -> list[Capture]:
    rig = session.rig
    # a balance's own 0.4 s filter smears the touch: its output is the model only after that
    dead_time_s = 0.5 if rig.device == "balance" else 0.15
    rule = PredictRule(CHANNELS, (SUPPORT_A_IN, SUPPORT_B_IN), rig.division_g,
                       dead_time_s=dead_time_s, rate_hz=rig.rate_hz)  # fmt: skip
    return _run_rule(session, rule)


def _median(values: Sequence[float]) -> float:
    return statistics.median(values) if values else math.nan


@dataclass
class MethodStats:
    """One method over some placements (those that stayed past their result limit for times)."""

    label: str
    n: int
    median_s: float
    misses: int
    doubles: int
    false_captures: int
    rms_points: float
    max_points: float
    rms_weight_g: float
    stray: int  # captures that belong to no placement (also counted as false)
    outcomes: list[Outcome] = field(default_factory=list, repr=False)


def summarize(label: str, outcomes: list[Outcome], stray: int) -> MethodStats:
    due = [o for o in outcomes if o.expected]
    pts = [o.points_err for o in outcomes if o.points_err is not None]
    wts = [o.weight_err_g for o in outcomes if o.weight_err_g is not None]
    return MethodStats(
        label=label,
        n=len(due),
        median_s=_median([o.time_s for o in due]),
        misses=sum(1 for o in due if o.captures == 0),
        doubles=sum(1 for o in outcomes if o.captures > 1),
        false_captures=sum(1 for p in pts if abs(p) > FALSE_CAPTURE_POINTS) + stray,
        rms_points=math.sqrt(statistics.fmean(p * p for p in pts)) if pts else math.nan,
        max_points=max((abs(p) for p in pts), default=math.nan),
        rms_weight_g=math.sqrt(statistics.fmean(w * w for w in wts)) if wts else math.nan,
        stray=stray,
        outcomes=outcomes,
    )


@dataclass
class BenchResult:
    per_rig: int
    seed: int
    rows: dict[str, MethodStats]  # 'naive', 'engine', 'result', 'display': every rig together
    by_rig: dict[str, dict[str, MethodStats]]
    placements: int  # all placements, including those lifted before their result was known

    def both_captured(self, rig: str | None = None) -> tuple[int, float, float]:
        """Placements (a) and (b) both captured: count, median (a) s, median (b) s."""
        rows = self.rows if rig is None else self.by_rig[rig]
        pairs = [(a, b) for a, b in zip(rows["naive"].outcomes, rows["engine"].outcomes,
                                         strict=True) if a.captures and b.captures]  # fmt: skip
        return (len(pairs), _median([a.time_s for a, _ in pairs]),
                _median([b.time_s for _, b in pairs]))  # fmt: skip


def _methods(truths: list[Truth], session: Session, rig: str) -> dict[str, MethodStats]:
    naive, stray_a = _score(truths, run_naive(session), rig)
    engine, stray_b = _score(truths, run_engine(session), rig)
    predict, stray_e = _score(truths, run_predict(session), rig)
    return {
        "naive": summarize("(a) fixed-window rule", naive, stray_a),
        "engine": summarize("(b) heft engine", engine, stray_b),
        "predict": summarize("(e) result predictor (prototype)", predict, stray_e),
        "result": summarize("(c) result limit", _limits(truths, rig, "t_result_s"), 0),
        "display": summarize("(d) display limit", _limits(truths, rig, "t_display_s"), 0),
    }


def run_bench(per_rig: int = 40, seed: int = 2026, rigs: Sequence[RigSpec] = RIGS) -> BenchResult:
    by_rig: dict[str, dict[str, MethodStats]] = {}
    for spec in rigs:
        session = build_session(spec, per_rig, seed)
        by_rig[spec.name] = _methods(session.truths, session, spec.name)
    rows: dict[str, MethodStats] = {}
    for key in ("naive", "engine", "predict", "result", "display"):
        outcomes = [o for methods in by_rig.values() for o in methods[key].outcomes]
        stray = sum(m[key].stray for m in by_rig.values())
        rows[key] = summarize(by_rig[rigs[0].name][key].label, outcomes, stray)
    return BenchResult(per_rig, seed, rows, by_rig, placements=per_rig * len(rigs))


def _fmt_s(x: float) -> str:
    return "miss" if math.isinf(x) else f"{x:.2f}"


def _verdict(ok: bool) -> str:
    return "met" if ok else "MISSED"


def format_table(r: BenchResult) -> str:
    a, b, c, d, e = (r.rows[k] for k in ("naive", "engine", "result", "display", "predict"))
    n_both, med_a, med_b = r.both_captured()
    missed = b.misses / b.n if b.n else math.nan
    lines = [
        f"capture benchmark: {r.placements} placements ({r.per_rig} per rig x {len(r.by_rig)} "
        f"rigs), {b.n} stayed past their result limit; seed {r.seed}; virtual time",
        "",
        "| row | median s | misses | doubles | false (>0.25 pt) | RMS SW pt | max SW pt "
        "| RMS W g |",
        "|---|---|---|---|---|---|---|---|",
    ]
    for row in (a, b, e):
        lines.append(
            f"| {row.label} | {_fmt_s(row.median_s)} | {row.misses} | {row.doubles} "
            f"| {row.false_captures} | {row.rms_points:.3f} | {row.max_points:.3f} "
            f"| {row.rms_weight_g:.3f} |"
        )
    for row in (c, d):
        lines.append(f"| {row.label} | {_fmt_s(row.median_s)} | - | - | - | - | - | - |")
    lines += [
        "",
        f"(b)/(c) median, all rigs: {b.median_s / c.median_s:.2f} "
        f"(target <= {TARGET_VS_LIMIT}: {_verdict(b.median_s <= TARGET_VS_LIMIT * c.median_s)})",
        f"(b)/(a) on the {n_both} placements both captured: {med_b / med_a:.2f} "
        f"(target <= {TARGET_VS_NAIVE}: {_verdict(med_b <= TARGET_VS_NAIVE * med_a)})",
        f"missed: {b.misses} of {b.n} = {missed:.1%} (target <= {TARGET_MISSED:.0%}: "
        f"{_verdict(missed <= TARGET_MISSED)})",
        f"false / double captures: {b.false_captures} / {b.doubles} (target 0 / 0: "
        f"{_verdict(b.false_captures == 0 and b.doubles == 0)})",
        f"worst swing-weight error of a capture: {b.max_points:.3f} point (target <= "
        f"{SW_RESOLUTION_POINTS}: {_verdict(b.max_points <= SW_RESOLUTION_POINTS)})",
        f"(e) prototype: (e)/(c) {e.median_s / c.median_s:.2f}, missed {e.misses} of {e.n}, "
        f"false / double {e.false_captures} / {e.doubles}, worst {e.max_points:.3f} point",
        "",
        "| rig | (a) s | (b) s | (e) s | (c) s | (d) s | (b)/(c) | (e)/(c) | (b)/(a) both "
        "| misses (a) (b) (e) | max SW pt (b) (e) |",
        "|---|---|---|---|---|---|---|---|---|---|---|",
    ]
    for name, m in r.by_rig.items():
        n_rig, rig_a, rig_b = r.both_captured(name)
        ratio_ba = f"{rig_b / rig_a:.2f} ({n_rig})" if n_rig else "- (0)"
        ratio_bc = m["engine"].median_s / m["result"].median_s
        ratio_ec = m["predict"].median_s / m["result"].median_s
        lines.append(
            f"| {name} | {_fmt_s(m['naive'].median_s)} | {_fmt_s(m['engine'].median_s)} "
            f"| {_fmt_s(m['predict'].median_s)} "
            f"| {_fmt_s(m['result'].median_s)} | {_fmt_s(m['display'].median_s)} "
            f"| {ratio_bc:.2f} {'ok' if ratio_bc <= TARGET_VS_LIMIT else 'MISSED'} "
            f"| {ratio_ec:.2f} | {ratio_ba} "
            f"| {m['naive'].misses} {m['engine'].misses} {m['predict'].misses} "
            f"| {m['engine'].max_points:.3f} {m['predict'].max_points:.3f} |"
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
        def plain(row: MethodStats) -> dict[str, object]:
            return {f: v for f, v in asdict(row).items() if f != "outcomes"}

        summary = {
            "rows": {k: plain(row) for k, row in result.rows.items()},
            "by_rig": {rig: {k: plain(row) for k, row in m.items()}
                       for rig, m in result.by_rig.items()},
            "seed": result.seed,
            "both_captured": result.both_captured(),
        }
        print(json.dumps(summary, indent=2))
    else:
        print(format_table(result))
    return 0


if __name__ == "__main__":
    sys.exit(main())
