"""Stillness of a zero, tare or calibration window (daemon.stillness), and tare mid-motion.

Check values: white noise has a sample-to-sample noise equal to its standard deviation (von
Neumann 1941: the mean square successive difference of independent values is twice their
variance); the +/-1 d stability bound is OIML R 76-1 4.4.2.
"""

from __future__ import annotations

import random
from pathlib import Path

import pytest

from heft.daemon.pipeline import BenchPipeline, SelectionError
from heft.daemon.stillness import Scatter, motion
from heft.drivers.sim.physics import Placement
from tests.service_bench import LARKSPUR_CLUBS
from tests.test_service_pipeline import T0, run_pipeline


def noise(n: int, sigma: float, seed: int = 1) -> list[float]:
    rng = random.Random(seed)
    return [rng.gauss(0.0, sigma) for _ in range(n)]


def test_white_noise_is_still_without_knowing_the_scale() -> None:
    for seed in range(20):  # 10 samples/s for 1.5 s: the smallest window a bench gives
        values = [35000 + v for v in noise(15, 20.0, seed)]
        assert motion(values, units_per_g=None, noise_g=0.05, division_g=0.1) is None
    s = Scatter.of(noise(4000, 3.0))
    assert s.step_noise == pytest.approx(3.0, rel=0.05)  # equals sigma for white noise
    assert s.motion_ratio == pytest.approx(1.0, rel=0.05)


def test_a_load_arriving_in_the_window_is_motion_in_counts() -> None:
    # 80 samples/s for 1.5 s, a 150 g load (x 420 counts/g) arriving after 0.5 s.
    values = [8000 + v + (63000 if i > 40 else 0) for i, v in enumerate(noise(120, 20.0))]
    why = motion(values, units_per_g=None, noise_g=0.05, division_g=0.1)
    assert why is not None and "counts scatter" in why


def test_in_grams_the_scatter_is_held_to_the_noise_or_one_division() -> None:
    still = [100.0 + v for v in noise(120, 0.05)]
    assert motion(still, units_per_g=1.0, noise_g=0.05, division_g=0.1) is None
    # Swaying by 2 g: far outside +/-1 d (0.1 g), stated in grams.
    sway = [100.0 + (2.0 if i % 40 < 20 else -2.0) for i in range(120)]
    why = motion(sway, units_per_g=1.0, noise_g=0.05, division_g=0.1)
    assert why is not None and why.startswith("2.01 g scatter")  # stdev, n - 1
    # The same in counts of a spanned channel (420 counts/g) reads the same grams.
    why_counts = motion([v * 420 for v in sway], units_per_g=420.0, noise_g=0.05, division_g=0.1)
    assert why_counts == why


def test_tare_mid_placement_is_refused_and_a_still_tare_is_taken() -> None:
    plan = [Placement(LARKSPUR_CLUBS[0], 1.0, 20.0)]
    p, _ = run_pipeline(plan, 1.25)  # the club is being laid down
    with pytest.raises(SelectionError, match=r"beam/\d was moving during the tare: .* g scatter"):
        p.tare("beam")
    assert all(p._channels[ch].tare_g == 0.0 for ch in p.channels)  # nothing tared
    quiet, _ = run_pipeline(plan, 0.9)  # empty and still
    assert quiet.tare(None).channels == ["beam/0", "beam/1"]


def test_tare_without_readings_is_refused(tmp_path: Path) -> None:
    from tests.service_bench import station_config

    p = BenchPipeline(station_config(port="/dev/null", db=tmp_path / "x.db"), lambda: T0)
    with pytest.raises(SelectionError, match="no recent readings"):
        p.tare("beam")
