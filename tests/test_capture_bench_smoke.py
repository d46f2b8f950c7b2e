"""The capture benchmark runs end to end on a small corpus (no timing assertions)."""

from __future__ import annotations

import math

import pytest

from tests.bench.capture_bench import format_table, main, run_bench
from tests.bench.capture_corpus import RIGS, build_session


def test_bench_runs_on_a_small_corpus() -> None:
    # two placements on each of the first five rigs: ten placements
    result = run_bench(per_rig=2, seed=7, rigs=RIGS[:5])
    assert set(result.rows) == {"naive", "engine", "predict", "result", "display"}
    assert result.placements == 10
    for row in result.rows.values():
        assert len(row.outcomes) == 10
    # every placement is either captured (with finite errors) or counted as a miss
    for o in result.rows["engine"].outcomes:
        assert (o.captures == 0) == math.isinf(o.time_s)
        if o.captures:
            assert o.points_err is not None and math.isfinite(o.points_err)
    table = format_table(result)
    assert "(b) heft engine" in table and "(c) result limit" in table


def test_corpus_is_seeded_and_carries_ground_truth() -> None:
    a = build_session(RIGS[0], 2, seed=3)
    assert build_session(RIGS[0], 2, seed=3).samples == a.samples
    assert build_session(RIGS[0], 2, seed=4).samples != a.samples
    for tr in a.truths:
        # the result is known no later than the display settles (a looser requirement)
        assert tr.t_result_s is not None and tr.t_on_s < tr.t_result_s < tr.t_off_s
        assert tr.t_display_s is None or tr.t_result_s <= tr.t_display_s
        # two supports: the static forces add up to the club's weight (statics)
        assert sum(tr.static_g.values()) == pytest.approx(tr.club.total_weight_g)


def test_command_line_prints_a_table(capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["--per-rig", "1"]) == 0
    out = capsys.readouterr().out
    assert "median" in out and "(b)/(c)" in out
