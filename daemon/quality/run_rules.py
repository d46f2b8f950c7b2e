"""Run rules for a Shewhart chart (the Western Electric / Nelson family), batch or one point at
a time.

The eight tests as Nelson numbered them (L. S. Nelson, "The Shewhart control chart - tests for
special causes", Journal of Quality Technology 16(4), 1984; rules 1, 5, 6 and 2 with eight
points are the Western Electric Statistical Quality Control Handbook's of 1956; numbering and
counts as given here are from memory of Nelson's list):

1. one point beyond 3 sigma;
2. nine points in a row on the same side of the centre line;
3. six points in a row steadily increasing or decreasing;
4. fourteen points in a row alternating up and down;
5. two out of three points in a row beyond 2 sigma, on the same side;
6. four out of five points in a row beyond 1 sigma, on the same side;
7. fifteen points in a row within 1 sigma of the centre line (either side);
8. eight points in a row beyond 1 sigma, on either side (none within 1 sigma).

"Beyond" is strict: a point exactly on a line is not beyond it, a point on the centre line
breaks a run on one side, and equal successive values break a trend or an alternation. A break
is reported at the point that completes the pattern (so a station raises the alarm as that
point arrives), with every point of the pattern; for rules 5 and 6 the completing point must
itself be one of the points beyond, which loses no pattern (the window before it was flagged);
at the start of a series k points beyond are enough, the window need not be full yet.
"""

from __future__ import annotations

import itertools
from collections.abc import Callable, Collection, Iterable, Sequence
from dataclasses import dataclass, field

from heft.daemon.quality.imr import ImrLimits
from heft.daemon.quality.inputs import QualityInputError, finite_number, finite_series

RULE_NAMES: dict[int, str] = {
    1: "one point beyond 3 sigma",
    2: "nine points in a row on one side of the centre line",
    3: "six points in a row steadily increasing or decreasing",
    4: "fourteen points in a row alternating up and down",
    5: "two of three points beyond 2 sigma on the same side",
    6: "four of five points beyond 1 sigma on the same side",
    7: "fifteen points in a row within 1 sigma",
    8: "eight points in a row beyond 1 sigma on either side",
}
ALL_RULES: tuple[int, ...] = tuple(RULE_NAMES)
LONGEST_WINDOW = 15  # rule 7; the most points any rule looks back over


@dataclass(frozen=True, slots=True)
class RuleBreak:
    rule: int
    index: int  # the point that completes the pattern
    points: tuple[int, ...]  # every point of the pattern, oldest first

    @property
    def name(self) -> str:
        return RULE_NAMES[self.rule]

    def describe(self) -> str:
        return f"rule {self.rule} ({self.name}) at point {self.index}"


def check_rules(rules: Iterable[int]) -> tuple[int, ...]:
    chosen = tuple(sorted(set(rules)))
    unknown = [r for r in chosen if r not in RULE_NAMES]
    if unknown or not chosen:
        raise QualityInputError(f"rules: expected numbers from 1 to 8, got {list(rules)!r}")
    return chosen


def _run(
    z: Sequence[float], end: int, length: int, test: Callable[[float], bool]
) -> tuple[int, ...] | None:
    start = end - length + 1
    if start < 0:
        return None
    window = range(start, end + 1)
    return tuple(window) if all(test(z[i]) for i in window) else None


def _k_of_m(z: Sequence[float], end: int, k: int, m: int, edge: float) -> tuple[int, ...] | None:
    start = max(0, end - m + 1)  # k points beyond at the very start already make k of m
    for sign in (1.0, -1.0):
        beyond = tuple(i for i in range(start, end + 1) if sign * z[i] > edge)
        if len(beyond) >= k and beyond[-1] == end:
            return beyond
    return None


def _trend(z: Sequence[float], end: int, points: int) -> tuple[int, ...] | None:
    start = end - points + 1
    if start < 0:
        return None
    steps = [z[i + 1] - z[i] for i in range(start, end)]
    if all(s > 0 for s in steps) or all(s < 0 for s in steps):
        return tuple(range(start, end + 1))
    return None


def _alternating(z: Sequence[float], end: int, points: int) -> tuple[int, ...] | None:
    start = end - points + 1
    if start < 0:
        return None
    steps = [z[i + 1] - z[i] for i in range(start, end)]
    if all(a * b < 0 for a, b in itertools.pairwise(steps)):
        return tuple(range(start, end + 1))
    return None


def _pattern(rule: int, z: Sequence[float], end: int) -> tuple[int, ...] | None:
    if rule == 1:
        return (end,) if abs(z[end]) > 3.0 else None
    if rule == 2:
        return _run(z, end, 9, lambda v: v > 0) or _run(z, end, 9, lambda v: v < 0)
    if rule == 3:
        return _trend(z, end, 6)
    if rule == 4:
        return _alternating(z, end, 14)
    if rule == 5:
        return _k_of_m(z, end, 2, 3, 2.0)
    if rule == 6:
        return _k_of_m(z, end, 4, 5, 1.0)
    if rule == 7:
        return _run(z, end, 15, lambda v: abs(v) < 1.0)
    return _run(z, end, 8, lambda v: abs(v) > 1.0)


def _breaks_at(
    z: Sequence[float], end: int, rules: tuple[int, ...], offset: int
) -> list[RuleBreak]:
    found = []
    for rule in rules:
        points = _pattern(rule, z, end)
        if points is not None:
            found.append(RuleBreak(rule, end + offset, tuple(p + offset for p in points)))
    return found


def rule_breaks(
    values: Iterable[float], limits: ImrLimits, rules: Iterable[int] = ALL_RULES
) -> list[RuleBreak]:
    """Every break in the series, in order of the completing point, then rule number."""
    chosen = check_rules(rules)
    z = [limits.z(v) for v in finite_series("values", values, minimum=0)]
    return [b for end in range(len(z)) for b in _breaks_at(z, end, chosen, 0)]


@dataclass(slots=True)
class RuleMonitor:
    """Feed points one at a time; each ``add`` says which rules the new point breaks now.

    Keeps only the last 15 standardised points; indices count every point added since the
    monitor started (first point 0), so an alarm can name the point.
    """

    limits: ImrLimits
    rules: Collection[int] = ALL_RULES
    _recent: list[float] = field(default_factory=list, init=False)
    _count: int = field(default=0, init=False)

    def __post_init__(self) -> None:
        self.rules = check_rules(self.rules)

    def add(self, value: float) -> list[RuleBreak]:
        z = self.limits.z(finite_number("value", value))
        self._recent = [*self._recent[-(LONGEST_WINDOW - 1) :], z]
        self._count += 1
        offset = self._count - len(self._recent)
        return _breaks_at(self._recent, len(self._recent) - 1, tuple(self.rules), offset)
