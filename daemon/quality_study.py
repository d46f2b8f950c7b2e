"""A crossed gauge R&R study run on the simulated bench, with simulated operators.

The statistics are ``heft.daemon.quality`` (pure); this module makes the readings. Every trial is a
placement on a simulated two-support beam (``heft.drivers.sim``): the beam's device bytes are
recorded in virtual time and replayed through the real driver and the real pipeline
(``heft.daemon.replay``), so each value is a captured measurement, not a number drawn directly.

A simulated operator lays the club a little differently each time: the butt sits a little off
the stop (an offset of their own plus scatter, which moves the balance point the beam sees) and
they set it down with a knock of their own (a bump just after landing, which the capture must
wait out). The clubs are invented Larkspur Clubworks clubs. All numbers are invented.
"""

from __future__ import annotations

import random
import tempfile
from collections.abc import Sequence
from dataclasses import dataclass
from datetime import UTC, datetime
from pathlib import Path
from typing import Literal

from heft.daemon.config import StationConfig, parse_config
from heft.daemon.measurement import Measurement
from heft.daemon.quality.grr_anova import GaugeReading
from heft.daemon.quality.grr_plan import StudyPlan, StudyStep
from heft.daemon.replay import replay
from heft.drivers.sim.definitions import BeamDef, builtin_of
from heft.drivers.sim.devices import BeamDevice
from heft.drivers.sim.physics import BenchTimeline, Club, Placement, TwoSupports
from heft.drivers.sim.scenario import MAKER, record_devices

Quantity = Literal["swingweight", "weight"]
QUANTITIES: tuple[Quantity, ...] = ("swingweight", "weight")

SUPPORT_A_IN, SUPPORT_B_IN = 4.0, 36.0
SPEC_NAME = "larkspur-study"
SPEC_SWINGWEIGHT, SPEC_TOLERANCE_POINTS = "D2", 1.5  # the Larkspur scenario's spec (invented)
SPEC_WEIGHT_G = (380.0, 440.0)  # invented
FIRST_ON_S = 2.0
HOLD_S = (2.5, 3.5)  # how long a club stays down (seeded draw); the capture needs about 1 s
GAP_S = (1.5, 2.5)  # bench empty between placements
LANDING_AT_S = 0.06  # the knock of setting the club down comes just after it touches
CREATED_UTC = datetime(2026, 5, 4, 8, 0, tzinfo=UTC)
DEFAULT_SCATTER_IN = 0.02  # "a few hundredths of an inch" at the butt stop


class StudyRunError(RuntimeError):
    """The simulated study did not give one capture per placement; the message says which."""


@dataclass(frozen=True, slots=True)
class SimOperator:
    """How one simulated operator lays a club on the bench (invented)."""

    name: str
    stop_offset_in: float  # their habit: how far off the butt stop the club usually sits
    stop_scatter_in: float  # standard deviation of that, placement to placement
    landing_g: float  # how hard they set the club down: bump amplitude (mean)
    landing_scatter_g: float

    def butt_shift_in(self, rng: random.Random) -> float:
        return self.stop_offset_in + rng.gauss(0.0, self.stop_scatter_in)

    def landing_bump_g(self, rng: random.Random) -> float:
        return max(0.0, rng.gauss(self.landing_g, self.landing_scatter_g))


def simulated_operators(
    names: Sequence[str], seed: int, scatter_in: float = DEFAULT_SCATTER_IN
) -> tuple[SimOperator, ...]:
    """One operator per name, each with their own habit; ``scatter_in`` scales them all."""
    rng = random.Random(f"operators:{seed}")
    return tuple(
        SimOperator(
            name=name,
            stop_offset_in=rng.gauss(0.0, scatter_in),
            stop_scatter_in=scatter_in * rng.uniform(0.5, 1.5),
            landing_g=rng.uniform(5.0, 40.0),
            landing_scatter_g=rng.uniform(2.0, 8.0),
        )
        for name in names
    )


def larkspur_study_clubs(names: Sequence[str], seed: int) -> dict[str, Club]:
    """Invented Larkspur Clubworks irons, spread wider than one set (about C7 to D9)."""
    rng = random.Random(f"clubs:{seed}")
    return {
        name: Club(
            total_weight_g=rng.uniform(395.0, 420.0),
            balance_point_in=rng.uniform(28.9, 29.5),
            club_id=f"LCW-GRR-{name}",
        )
        for name in names
    }


def study_station_config(beam: BeamDef) -> StationConfig:
    """A two-support station whose channels use the simulated beam's own calibration."""
    channels = {
        f"beam/{ch.bench_channel}": {
            "source": "config",
            "zero_counts": ch.offset_counts,
            "counts_per_g": ch.counts_per_g,
        }
        for ch in beam.channels
    }
    data = {
        "station": "bench-1",
        "spec": SPEC_NAME,
        "storage": {"path": "unused.db"},  # replay stores nothing
        "devices": [{"name": "beam", "driver": "beam", "port": "/dev/null"}],
        "geometry": {
            "type": "two_support",
            "channel_a": "beam/0",
            "position_a_in": SUPPORT_A_IN,
            "channel_b": "beam/1",
            "position_b_in": SUPPORT_B_IN,
        },
        "channels": channels,
        "capture": {"preset_name": "hx711_80hz", "capacity_g": beam.capacity_g},
        "specs": {
            SPEC_NAME: {
                "swingweight": SPEC_SWINGWEIGHT,
                "tolerance_points": SPEC_TOLERANCE_POINTS,
                "total_weight": {"min_g": SPEC_WEIGHT_G[0], "max_g": SPEC_WEIGHT_G[1]},
            }
        },
    }
    return parse_config(data)


def spec_tolerance(config: StationConfig, quantity: Quantity) -> float | None:
    """The width of the spec's band (USL - LSL) for ``quantity``; None when the spec has none."""
    name = config.active_spec_name()
    spec = config.specs.get(name) if name else None
    if spec is None:
        return None
    if quantity == "swingweight":
        return 2.0 * spec.tolerance_points if spec.swingweight is not None else None
    band = spec.total_weight
    return None if band is None else float(band.max_g - band.min_g)


@dataclass(frozen=True, slots=True)
class StudyTrial:
    """One step of the plan, as placed and as measured."""

    step: StudyStep
    placement: Placement
    measurement: Measurement

    def value(self, quantity: Quantity) -> float:
        m = self.measurement
        return m.swingweight_points if quantity == "swingweight" else m.total_weight_g

    def reading(self, quantity: Quantity) -> GaugeReading:
        step = self.step
        return GaugeReading(step.part, step.operator, step.trial, self.value(quantity))


def _placements(
    plan: StudyPlan, clubs: dict[str, Club], operators: dict[str, SimOperator], seed: int
) -> list[Placement]:
    """The plan's steps as placements on one bench timeline, in order."""
    rng = random.Random(f"placements:{seed}")
    out: list[Placement] = []
    t = FIRST_ON_S
    for step in plan.steps:
        who, club = operators[step.operator], clubs[step.part]
        shifted = Club(
            club.total_weight_g, club.balance_point_in + who.butt_shift_in(rng), club.club_id
        )
        hold = rng.uniform(*HOLD_S)
        knock = ((t + LANDING_AT_S, who.landing_bump_g(rng)),)
        out.append(Placement(shifted, t, t + hold, knock))
        t += hold + rng.uniform(*GAP_S)
    return out


def run_study(
    plan: StudyPlan,
    clubs: dict[str, Club],
    operators: Sequence[SimOperator],
    *,
    seed: int,
) -> tuple[list[StudyTrial], StationConfig]:
    """Lay every club of the plan on the simulated bench and capture it through the pipeline."""
    beam_def = builtin_of("beam", BeamDef).model_copy(update={"name": "beam", "rate_hz": 80})
    config = study_station_config(beam_def)
    by_name = {o.name: o for o in operators}
    placements = _placements(plan, clubs, by_name, seed)
    timeline = BenchTimeline(TwoSupports(SUPPORT_A_IN, SUPPORT_B_IN), placements)
    beam = BeamDevice(beam_def, timeline, seed=seed)
    end_s = placements[-1].t_off_s + 1.5
    note = f"{MAKER}, gauge R&R study on the simulated bench; seed {seed}"
    recordings = record_devices([beam], end_s, created_utc=CREATED_UTC, description=note)
    with tempfile.TemporaryDirectory(prefix="heft-study-") as folder:
        path = Path(folder) / "beam.jsonl"
        path.write_text("\n".join(recordings["beam"]) + "\n", encoding="utf-8")
        measurements = list(replay(config, [path]))
    return match_captures(plan, placements, measurements), config


def match_captures(
    plan: StudyPlan, placements: list[Placement], measurements: list[Measurement]
) -> list[StudyTrial]:
    """Each placement's one capture, found by its capture time on the recording's clock."""
    trials: list[StudyTrial] = []
    for step, placement in zip(plan.steps, placements, strict=True):
        inside = [
            m
            for m in measurements
            if m.t is not None and placement.t_on_s <= m.t <= placement.t_off_s
        ]
        if len(inside) != 1:
            raise StudyRunError(
                f"{step.describe('club')}: expected one capture while the club was down "
                f"({placement.t_on_s:.2f} s to {placement.t_off_s:.2f} s), got {len(inside)}"
            )
        trials.append(StudyTrial(step, placement, inside[0]))
    return trials
