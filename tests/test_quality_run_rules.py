"""Each run rule with a series that must break it and one just short of breaking it.

Rules as Nelson numbered them (Journal of Quality Technology 16(4), 1984; from memory). The
limits are centre 0, sigma 1, so every value below is in sigmas from the centre.
"""

from __future__ import annotations

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from heft.daemon.quality.imr import ImrLimits
from heft.daemon.quality.inputs import QualityInputError
from heft.daemon.quality.run_rules import RULE_NAMES, RuleMonitor, rule_breaks

UNIT = ImrLimits.given(0.0, 1.0)

BREAKS: list[tuple[int, list[float], int, tuple[int, ...]]] = [
    (1, [0.0, 0.0, 3.5], 2, (2,)),
    (1, [0.0, -3.01], 1, (1,)),
    (2, [-0.5] + [0.5] * 9, 9, tuple(range(1, 10))),
    (2, [-0.2] * 9, 8, tuple(range(9))),
    (3, [0.0, 0.1, 0.2, 0.3, 0.4, 0.5], 5, tuple(range(6))),
    (3, [0.5, 0.4, 0.3, 0.2, 0.1, 0.0], 5, tuple(range(6))),
    (4, [0.1, -0.1] * 7, 13, tuple(range(14))),
    (5, [0.0, 2.5, 0.0, 2.5], 3, (1, 3)),
    (5, [-2.1, -2.1], 1, (0, 1)),
    (6, [1.5, 1.5, 0.0, 1.5, 1.5], 4, (0, 1, 3, 4)),
    (6, [-1.2, -1.2, -1.2, -1.2], 3, (0, 1, 2, 3)),
    (7, [0.2, -0.2, 0.9] * 5, 14, tuple(range(15))),
    (8, [1.5, -1.5] * 4, 7, tuple(range(8))),
]

JUST_SHORT: list[tuple[int, list[float]]] = [
    (1, [0.0, 3.0, -3.0, 2.99]),  # on the limit is not beyond
    (2, [0.5] * 8),  # eight, not nine
    (2, [0.5] * 4 + [0.0] + [0.5] * 4),  # a point on the centre line ends the run
    (3, [0.0, 0.1, 0.2, 0.3, 0.4]),  # five, not six
    (3, [0.0, 0.1, 0.2, 0.2, 0.3, 0.4]),  # a tie is not an increase
    (4, [0.1, -0.1] * 6 + [0.1]),  # thirteen, not fourteen
    (4, [0.1, -0.1] * 3 + [-0.1] + [0.1, -0.1] * 3 + [0.1]),  # one repeat breaks it
    (5, [2.5, 0.0, 0.0, 2.5]),  # beyond 2 sigma, but not two within three
    (5, [2.5, 0.0, -2.5]),  # two of three beyond, on opposite sides
    (5, [2.0, 2.0]),  # on the 2 sigma line is not beyond
    (6, [1.5, 0.0, 1.5, 0.0, 1.5]),  # three of five
    (6, [1.5, -1.5, 1.5, 0.0, 1.5]),  # four beyond, one of them on the other side
    (7, [0.2] * 14),  # fourteen, not fifteen
    (7, [0.2] * 7 + [1.0] + [0.2] * 7),  # on the 1 sigma line is not within
    (8, [1.5, -1.5] * 3 + [1.5]),  # seven, not eight
    (8, [1.5, -1.5, 1.5, 1.0, -1.5, 1.5, -1.5, 1.5]),  # one on the 1 sigma line
]


@pytest.mark.parametrize(("rule", "series", "index", "points"), BREAKS)
def test_series_breaks_the_rule(
    rule: int, series: list[float], index: int, points: tuple[int, ...]
) -> None:
    found = rule_breaks(series, UNIT, rules=[rule])
    assert found, f"rule {rule} not broken by {series}"
    first = found[0]
    assert (first.rule, first.index, first.points) == (rule, index, points)
    assert first.name == RULE_NAMES[rule]
    assert first.describe() == f"rule {rule} ({RULE_NAMES[rule]}) at point {index}"


@pytest.mark.parametrize(("rule", "series"), JUST_SHORT)
def test_series_just_short_does_not_break_the_rule(rule: int, series: list[float]) -> None:
    assert rule_breaks(series, UNIT, rules=[rule]) == []


def test_a_pattern_that_goes_on_is_reported_at_each_new_point() -> None:
    found = rule_breaks([0.5] * 11, UNIT, rules=[2])
    assert [b.index for b in found] == [8, 9, 10]


def test_limits_scale_the_zones() -> None:
    limits = ImrLimits.given(100.0, 0.5)  # 3 sigma = 1.5 above the centre
    assert [b.index for b in rule_breaks([100.0, 101.49, 101.51], limits, rules=[1])] == [2]


@settings(max_examples=60, deadline=None)
@given(st.lists(st.sampled_from([-3.5, -2.5, -1.5, -0.5, 0.0, 0.5, 1.5, 2.5, 3.5]), max_size=60))
def test_monitor_one_point_at_a_time_agrees_with_the_batch(series: list[float]) -> None:
    monitor = RuleMonitor(UNIT)
    incremental = [b for value in series for b in monitor.add(value)]
    assert incremental == rule_breaks(series, UNIT)


def test_monitor_names_the_rule_for_the_new_point() -> None:
    monitor = RuleMonitor(UNIT, rules=[1, 5])
    assert monitor.add(0.0) == [] and monitor.add(2.5) == []
    alarm = monitor.add(2.6)
    assert [(b.rule, b.index, b.points) for b in alarm] == [(5, 2, (1, 2))]
    assert [b.rule for b in monitor.add(4.0)] == [1, 5]


def test_unknown_rules_and_bad_points_are_refused() -> None:
    with pytest.raises(QualityInputError, match="rules"):
        rule_breaks([0.0], UNIT, rules=[9])
    with pytest.raises(QualityInputError, match="rules"):
        RuleMonitor(UNIT, rules=[])
    with pytest.raises(QualityInputError, match="value"):
        RuleMonitor(UNIT).add(float("nan"))
