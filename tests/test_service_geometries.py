"""Every geometry through heft replay: recordings made by the simulated devices in virtual time.

Check values: the simulated clubs (their Lorythmic points from domain.md's definition) and, for
the demo scenario, the simulator's own ground truth.
"""

from __future__ import annotations

from datetime import UTC, datetime
from pathlib import Path

import pytest

from heft.daemon.config import load_config
from heft.daemon.measurement import Verdict
from heft.daemon.replay import replay
from heft.drivers.sim.definitions import BeamDef, ScannerDef, StreamBalanceDef, builtin_definition
from heft.drivers.sim.devices import SimDevice, make_device
from heft.drivers.sim.physics import BenchTimeline, Club, Placement, make_geometry
from heft.drivers.sim.scenario import larkspur_irons, record_devices, write_recordings
from tests.service_bench import expected_points

EXAMPLES = Path(__file__).resolve().parent.parent / "examples"
CREATED = datetime(2026, 5, 4, 10, 0, tzinfo=UTC)


def write(tmp_path: Path, devices: list[SimDevice], until_s: float) -> list[Path]:
    paths = []
    for name, lines in record_devices(devices, until_s, created_utc=CREATED).items():
        path = tmp_path / f"{name}.jsonl"
        path.write_text("\n".join(lines) + "\n")
        paths.append(path)
    return paths


def test_demo_scenario_replays_with_scanned_ids_and_true_numbers(tmp_path: Path) -> None:
    scenario = larkspur_irons()
    paths = write_recordings(scenario, seed=3, folder=tmp_path)
    config = load_config(EXAMPLES / "bench-1-two-support.toml")
    ms = list(replay(config, sorted(paths.values())))
    clubs = [club for _, club in scenario.clubs]
    assert [m.club_id for m in ms] == [c.club_id for c in clubs]  # one capture each, tagged
    for m, club in zip(ms, clubs, strict=True):
        assert m.total_weight_g == pytest.approx(club.total_weight_g, abs=0.3)
        assert m.swingweight_points == pytest.approx(expected_points(club), abs=0.1)
    # The example's spec is D2 +/- 0.5 with the PW at D3: the scenario's heavy 8-iron fails.
    verdicts = {m.club_id: m.verdict for m in ms}
    assert verdicts["LCW-2611-8I"] is Verdict.FAIL
    assert verdicts["LCW-2611-7I"] in (Verdict.PASS, Verdict.NEAR_LIMIT)


def test_lever_beam_pairs_a_weighing_with_a_beam_reading(tmp_path: Path) -> None:
    club = Club(405.0, 29.20, "LCW-QC-0001")
    lever_def = builtin_definition("beam_1ch")
    scale_def = builtin_definition("stream_balance")
    assert isinstance(lever_def, BeamDef) and isinstance(scale_def, StreamBalanceDef)
    # Weighed on the balance from 1 s to 4 s, then laid on the beam from 6 s to 10 s.
    scale = make_device(scale_def, BenchTimeline(make_geometry("single"), [Placement(club, 1, 4)]))
    lever = make_device(
        lever_def, BenchTimeline(make_geometry("lever", lever_arm_in=5.0), [Placement(club, 6, 10)])
    )
    config = load_config(EXAMPLES / "qc-1-lever-beam.toml")
    (m,) = replay(config, write(tmp_path, [scale, lever], 11.0))
    assert m.total_weight_g == pytest.approx(405.0, abs=0.05)
    assert m.balance_point_in == pytest.approx(29.20, abs=0.01)
    assert m.swingweight_points == pytest.approx(expected_points(club), abs=0.05)
    assert [w.channel for w in m.channels] == ["lever/0", "scale/0"]
    assert m.calibration_ids == ["config:lever/0"]
    assert m.swingweight_points_u is not None and m.swingweight_points_u > 0


def test_single_scale_takes_the_balance_point_from_a_scanner_tag(tmp_path: Path) -> None:
    club = Club(398.0, 29.50, "LCW-QC-0002")
    scale_def = builtin_definition("stream_balance")
    scanner_def = builtin_definition("scanner")
    assert isinstance(scale_def, StreamBalanceDef) and isinstance(scanner_def, ScannerDef)
    timeline = BenchTimeline(make_geometry("single"), [Placement(club, 1, 4)])
    scale = make_device(scale_def, timeline)
    # The club id before the weighing, its balance point (knife edge) after it.
    scanner = make_device(scanner_def, timeline, scans=[(0.5, club.club_id), (5.0, "BP:749.3mm")])
    text = (EXAMPLES / "qc-2-single-scale.toml").read_text()
    text = text.replace('driver = "poll_balance"', 'driver = "stream_balance"')
    config_path = tmp_path / "qc-2.toml"
    config_path.write_text(text)
    (m,) = replay(load_config(config_path), write(tmp_path, [scale, scanner], 6.0))
    assert m.club_id == club.club_id
    assert m.total_weight_g == pytest.approx(398.0, abs=0.05)
    assert m.balance_point_in == pytest.approx(749.3 / 25.4)  # 29.5 in, the inch is 25.4 mm
    assert m.swingweight_points == pytest.approx(expected_points(club), abs=0.05)
    # The entered balance point (u = 0.07 in) dominates: U = 2 * W * u / 49.61 g*in per point
    # (GUM first-order propagation of M = W * (BP - 14); derived), about 1.12 points.
    assert m.swingweight_points_u == pytest.approx(2 * 398.0 * 0.07 / 49.6117, rel=0.02)
