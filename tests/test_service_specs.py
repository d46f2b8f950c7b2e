"""Spec verdicts: pass, near limit and fail, check by check, with per-club targets."""

from __future__ import annotations

import pytest

from heft.daemon.config import ClubTarget, LengthRange, MassRange, SpecConfig
from heft.daemon.measurement import Verdict
from heft.daemon.physics.swingweight import points_from_label
from heft.daemon.specs import judge

SPEC = SpecConfig(
    swingweight="D2",
    tolerance_points=0.5,
    total_weight=MassRange(min_g=400.0, max_g=430.0),
    balance_point=LengthRange(min_in=27.0, max_in=30.0),
    near_limit_fraction=0.2,
    clubs={
        "pw": ClubTarget(swingweight="D3"),
        "sw": ClubTarget(swingweight="D4", tolerance_points=1.0),
    },
)
D2 = points_from_label("D2")  # 32 points (A0 = 0, ten per letter; domain.md)


def run(points: float, weight: float = 415.0, bp: float = 28.5, club: str | None = None):
    return judge(SPEC, club, total_weight_g=weight, balance_point_in=bp, swingweight_points=points)


def test_centre_passes_every_check() -> None:
    j = run(D2)
    assert j.verdict is Verdict.PASS
    assert [c.check for c in j.checks] == ["swingweight", "total_weight", "balance_point"]
    assert all(c.verdict is Verdict.PASS for c in j.checks)


def test_near_the_edge_warns() -> None:
    # Band D1.5..D2.5, margin 0.2 * 0.5 = 0.1 point: D2.45 is near the limit.
    j = run(D2 + 0.45)
    assert j.verdict is Verdict.NEAR_LIMIT
    assert j.checks[0].verdict is Verdict.NEAR_LIMIT


@pytest.mark.parametrize(
    ("points", "weight", "bp", "failed"),
    [
        (D2 + 0.6, 415.0, 28.5, ["swingweight"]),
        (D2, 431.0, 28.5, ["total_weight"]),
        (D2, 415.0, 26.9, ["balance_point"]),
        (D2 - 1.0, 399.0, 28.5, ["swingweight", "total_weight"]),
    ],
)
def test_fail_names_the_failing_checks(
    points: float, weight: float, bp: float, failed: list[str]
) -> None:
    j = run(points, weight, bp)
    assert j.verdict is Verdict.FAIL
    assert [c.check for c in j.failed] == failed
    for c in j.failed:
        assert "over the limit" in c.message or "under the limit" in c.message


def test_per_club_target_overrides() -> None:
    d3 = points_from_label("D3")
    assert run(d3, club="pw").verdict is Verdict.PASS
    assert run(d3).verdict is Verdict.FAIL  # the set's own D2 target
    sw = run(points_from_label("D4.9"), club="sw")  # tolerance 1.0 there
    assert sw.verdict is Verdict.NEAR_LIMIT
    assert sw.checks[0].low == pytest.approx(points_from_label("D3"))


def test_no_spec_is_not_judged() -> None:
    j = judge(None, None, total_weight_g=1, balance_point_in=1, swingweight_points=1)
    assert j.verdict is Verdict.NO_SPEC and j.checks == []


def test_messages_use_the_words_of_the_rest_of_heft_essentials_first() -> None:
    # QA: "swingweight ... (target D2 +/- 0.5): above the high limit by 1.2"; the rest of heft
    # says "swing weight" and "±", and a banner cuts what comes last.
    j = run(D2 + 1.2, 431.0, 26.5)
    assert [c.message for c in j.checks] == [
        "swing weight D3.2: 0.7 points over the limit (D2 ± 0.5)",
        "total weight 431.0 g: 1 g over the limit (400 to 430 g)",
        "balance point 26.50 in: 0.5 in under the limit (27 to 30 in)",
    ]
    assert run(D2).checks[0].message == "swing weight D2.0: in spec (D2 ± 0.5)"
