"""The order in which a crossed gauge study is measured, as a value the guided flow can walk.

As the AIAG MSA manual (4th ed., the ANOVA/average-and-range study procedure; from memory)
describes it: in each trial round, operator A measures every part in a random order, then
operator B in a fresh random order, and so on; the next round repeats with new random orders.
Random order keeps drift and memory of earlier readings out of the repeatability figure.
"""

from __future__ import annotations

import random
from collections.abc import Sequence
from dataclasses import dataclass

from heft.daemon.quality.inputs import QualityInputError


@dataclass(frozen=True, slots=True)
class StudyStep:
    trial: int  # 1-based trial round
    operator: str
    part: str

    def describe(self, part_noun: str = "part") -> str:
        return f"operator {self.operator}, {part_noun} {self.part}, trial {self.trial}"


@dataclass(frozen=True, slots=True)
class StudyPlan:
    parts: tuple[str, ...]
    operators: tuple[str, ...]
    trials: int
    seed: int | None
    steps: tuple[StudyStep, ...]
    part_noun: str = "part"  # what the guided flow calls a part ("club", "shaft")

    def next_step(self, done: int) -> StudyStep | None:
        """The step after ``done`` readings have been taken; None when the study is complete."""
        if done < 0:
            raise QualityInputError(f"done: expected 0 or more readings taken, got {done}")
        return self.steps[done] if done < len(self.steps) else None

    def describe_next(self, done: int) -> str:
        step = self.next_step(done)
        return "study complete" if step is None else f"next: {step.describe(self.part_noun)}"


def _labels(field: str, given: int | Sequence[str], default: Sequence[str]) -> tuple[str, ...]:
    if isinstance(given, int) and not isinstance(given, bool):
        if given < 2:
            raise QualityInputError(f"{field}: a crossed study needs at least 2, got {given}")
        return tuple(default[i] if i < len(default) else str(i + 1) for i in range(given))
    if isinstance(given, str | bytes) or not isinstance(given, Sequence):
        raise QualityInputError(f"{field}: expected a count or a list of names, got {given!r}")
    labels = tuple(str(x) for x in given)
    if len(labels) < 2 or len(set(labels)) != len(labels):
        raise QualityInputError(f"{field}: expected at least 2 distinct names, got {labels!r}")
    return labels


def study_plan(
    parts: int | Sequence[str],
    operators: int | Sequence[str],
    trials: int,
    seed: int | None = None,
    part_noun: str = "part",
) -> StudyPlan:
    """Plan n parts x k operators x r trials; counts get names 1..n and A, B, C..."""
    part_names = _labels("parts", parts, [])
    letters = [chr(ord("A") + i) for i in range(26)]
    operator_names = _labels("operators", operators, letters)
    if isinstance(trials, bool) or not isinstance(trials, int) or trials < 2:
        raise QualityInputError(f"trials: expected a whole number of at least 2, got {trials!r}")
    rng = random.Random(seed)
    steps: list[StudyStep] = []
    for trial in range(1, trials + 1):
        for operator in operator_names:
            order = list(part_names)
            rng.shuffle(order)
            steps.extend(StudyStep(trial, operator, part) for part in order)
    return StudyPlan(part_names, operator_names, trials, seed, tuple(steps), part_noun)
