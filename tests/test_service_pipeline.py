"""The pure bench pipeline on simulated beam bytes, and heft replay over a recording.

Check values: the simulated clubs' own moments, converted with the Lorythmic definition
(points = (M14 - 161 oz*in) / 1.75 oz*in, domain.md trade tables); weights and balance points
are the simulator's inputs. Tolerances allow for the simulated cell noise (0.05 g rms).
"""

from __future__ import annotations

import json
import uuid
from datetime import UTC, datetime, timedelta
from pathlib import Path

import pytest

from heft.daemon.alarms import AlarmCondition, AlarmManager
from heft.daemon.events import Alarm, AlarmKind, MeasurementCaptured
from heft.daemon.measurement import Measurement, Verdict
from heft.daemon.pipeline import REPLAY_NAMESPACE, BenchPipeline, PipelineOutput, SelectionError
from heft.daemon.replay import replay
from heft.daemon.version import __version__
from heft.drivers.registry import create_driver
from heft.drivers.sim.physics import Placement
from heft.tui.cli import main
from tests.service_bench import (
    LARKSPUR_CLUBS,
    beam_bytes,
    expected_points,
    placements,
    station_config,
    station_toml,
    write_beam_recording,
)

T0 = datetime(2026, 5, 4, 8, 30, tzinfo=UTC)


def run_pipeline(
    plan: list[Placement], until_s: float, *, tags: dict[float, str] | None = None,
    pipeline: BenchPipeline | None = None,
) -> tuple[BenchPipeline, list[PipelineOutput]]:
    now = [0.0]
    p = pipeline or BenchPipeline(
        station_config(port="/dev/null", db=Path("x.db")), lambda: T0 + timedelta(seconds=now[0])
    )
    driver = create_driver("beam", "beam")
    events: list[PipelineOutput] = []
    pending_tags = sorted((tags or {}).items())
    for chunk in beam_bytes(plan, until_s):
        now[0] = chunk.t
        while pending_tags and pending_tags[0][0] <= chunk.t:
            p.set_club_id(pending_tags.pop(0)[1])
        events.extend(p.tick(chunk.t))
        for out in driver.feed(chunk.data, chunk.t):
            events.extend(p.feed(out))
    return p, events


def measurements(events: list[PipelineOutput]) -> list[Measurement]:
    return [e.measurement for e in events if isinstance(e, MeasurementCaptured)]


def alarm_changes(outputs: list[PipelineOutput]) -> list[Alarm]:
    """The alarm changes the outputs make once applied to the station's alarms (the service)."""
    alarms = AlarmManager("bench-1", lambda: T0)
    changes = (alarms.apply(o) for o in outputs if isinstance(o, AlarmCondition))
    return [a for a in changes if a is not None]


def test_each_placement_becomes_one_measurement_with_the_right_numbers() -> None:
    plan = placements(LARKSPUR_CLUBS)
    tags = {p.t_on_s - 0.5: p.club.club_id for p in plan}
    _, events = run_pipeline(plan, plan[-1].t_off_s + 1.0, tags=tags)
    ms = measurements(events)
    assert len(ms) == len(LARKSPUR_CLUBS)
    for m, p in zip(ms, plan, strict=True):
        club = p.club
        assert m.club_id == club.club_id
        assert m.total_weight_g == pytest.approx(club.total_weight_g, abs=0.3)
        assert m.balance_point_in == pytest.approx(club.balance_point_in, abs=0.02)
        assert m.swingweight_points == pytest.approx(expected_points(club), abs=0.1)
        assert p.t_on_s < (m.t or 0) < p.t_off_s
        # Expanded uncertainties are there and cover the error (k = 2).
        assert m.swingweight_points_u is not None and 0 < m.swingweight_points_u < 0.5
        assert abs(m.swingweight_points - expected_points(club)) <= 2 * m.swingweight_points_u
        assert m.calibration_ids == ["config:beam/0", "config:beam/1"]
        assert [w.channel for w in m.channels] == ["beam/0", "beam/1"]
        assert m.software_version == __version__
        assert m.job == "larkspur-irons" and m.spec == "irons-d2"
    assert [m.seq for m in ms] == [1, 2, 3]
    assert [m.verdict for m in ms] == [Verdict.PASS, Verdict.PASS, Verdict.FAIL]
    assert ms[2].checks[0].check == "swingweight" and ms[2].checks[0].verdict is Verdict.FAIL
    alarms = alarm_changes(events)
    assert [(a.kind, a.active) for a in alarms] == [(AlarmKind.OUT_OF_SPEC, True)]
    # Essentials first and short: the dashboard's alarm banner is one 120-column line.
    assert alarms[0].message.startswith("club LCW-6i-0001: swing weight D3.")
    assert "points over the limit (D2 ± 0.5)" in alarms[0].message
    assert len(alarms[0].message) <= 90


def test_the_pipeline_hands_out_alarm_conditions_after_their_measurement() -> None:
    # The pipeline keeps no alarm state: each verdict comes out as a condition, right after the
    # measurement it judges, and the service decides what is a change (alarm_changes above).
    plan = placements(LARKSPUR_CLUBS)
    p, events = run_pipeline(plan, plan[-1].t_off_s + 1.0)
    assert not hasattr(p, "alarms")
    judged = [
        (events[i - 1].measurement.seq, o.active, o.message)
        for i, o in enumerate(events)
        if isinstance(o, AlarmCondition) and o.kind is AlarmKind.OUT_OF_SPEC
        and isinstance(events[i - 1], MeasurementCaptured)
    ]
    assert [(seq, active) for seq, active, _ in judged] == [(1, False), (2, False), (3, True)]
    assert judged[0][2] == "club #1 in spec"
    assert all(o.source == "station" for o in events
               if isinstance(o, AlarmCondition) and o.kind is AlarmKind.OUT_OF_SPEC)


def test_a_club_left_on_the_beam_is_captured_once() -> None:
    plan = [Placement(LARKSPUR_CLUBS[0], 1.0, 15.0)]
    _, events = run_pipeline(plan, 16.0)
    assert len(measurements(events)) == 1


def test_rearm_allows_a_second_capture_of_the_same_club() -> None:
    plan = [Placement(LARKSPUR_CLUBS[0], 1.0, 10.0)]
    p, events = run_pipeline(plan, 5.0)
    assert len(measurements(events)) == 1
    p.rearm()
    # Continue the same bench from 5 s on (the driver keeps its state across chunks).
    driver = create_driver("beam", "beam")
    more: list[PipelineOutput] = []
    for chunk in beam_bytes(plan, 9.0):
        for out in driver.feed(chunk.data, chunk.t):
            if chunk.t > 5.0:
                more.extend(p.feed(out))
    assert len(measurements(more)) == 1


def test_selections_are_validated() -> None:
    p = BenchPipeline(station_config(port="/dev/null", db=Path("x.db")), lambda: T0)
    with pytest.raises(SelectionError, match="no job 'woods'"):
        p.select_job("woods")
    with pytest.raises(SelectionError, match="no spec"):
        p.select_spec("nope")
    with pytest.raises(SelectionError, match="single_scale"):
        p.set_balance_point("29in")
    with pytest.raises(SelectionError, match="empty"):
        p.set_club_id("  ")


def test_replay_ids_are_deterministic_uuid5() -> None:
    plan = placements(LARKSPUR_CLUBS[:1])
    cfg = station_config(port="/dev/null", db=Path("x.db"))
    p = BenchPipeline(cfg, lambda: T0, replay_source="run-1.jsonl")
    _, events = run_pipeline(plan, plan[-1].t_off_s + 1, pipeline=p)
    (m,) = measurements(events)
    assert m.id.version == 5
    assert m.id == uuid.uuid5(REPLAY_NAMESPACE, "run-1.jsonl#1")


def test_heft_replay_prints_one_line_per_capture_deterministically(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    plan = placements(LARKSPUR_CLUBS)
    rec = tmp_path / "bench-1-beam.jsonl"
    write_beam_recording(rec, plan, plan[-1].t_off_s + 1.0)
    config = tmp_path / "station.toml"
    config.write_text(station_toml(port="/dev/null", db=tmp_path / "none.db"))
    outputs = []
    for _ in range(2):
        assert main(["replay", "--config", str(config), str(rec)]) == 0
        outputs.append(capsys.readouterr().out)
    assert outputs[0] == outputs[1]
    lines = [json.loads(line) for line in outputs[0].splitlines()]
    assert len(lines) == 3
    for line, p in zip(lines, plan, strict=True):
        assert p.t_on_s < line["t"] < p.t_off_s
        assert line["swingweight_points"] == pytest.approx(expected_points(p.club), abs=0.1)
        assert line["total_weight_g"] == pytest.approx(p.club.total_weight_g, abs=0.3)
        Measurement.model_validate(line)  # every MQTT payload field is there
    # Wall clock = the recording's start plus the capture time.
    first = Measurement.model_validate(lines[0])
    start = datetime(2026, 5, 4, 8, 30, tzinfo=UTC)
    assert first.time_utc == start + timedelta(seconds=first.t or 0)


def test_replay_function_matches_the_pipeline(tmp_path: Path) -> None:
    plan = placements(LARKSPUR_CLUBS)
    rec = tmp_path / "beam.jsonl"
    write_beam_recording(rec, plan, plan[-1].t_off_s + 1.0)
    cfg = station_config(port="/dev/null", db=tmp_path / "x.db")
    replayed = list(replay(cfg, [rec]))
    _, events = run_pipeline(plan, plan[-1].t_off_s + 1.0)
    direct = measurements(events)
    assert [m.swingweight_points for m in replayed] == [m.swingweight_points for m in direct]
    # The recording keeps t to the microsecond.
    assert [m.t for m in replayed] == pytest.approx([m.t for m in direct], abs=1e-6)


def test_replay_refuses_a_recording_of_another_device(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    rec = tmp_path / "scale.jsonl"
    rec.write_text(
        '{"format": "heft-recording", "version": 1, "device": "scale", '
        '"driver": "stream_balance"}\n'
    )
    config = tmp_path / "station.toml"
    config.write_text(station_toml(port="/dev/null", db=tmp_path / "none.db"))
    assert main(["replay", "--config", str(config), str(rec)]) == 2
    assert "matches no single device" in capsys.readouterr().err



def test_a_small_load_left_on_the_empty_beam_raises_the_needs_zero_alarm() -> None:
    # 3 g (a lost ferrule, say) left over the butt support: too light to be a club, too far from
    # zero for zero tracking (0.5 d, OIML R 76-1 4.5.7) to follow, so the operator must zero.
    from heft.drivers.sim.physics import Club

    _, events = run_pipeline([Placement(Club(3.0, 4.0), 2.0, 60.0)], 30.0)
    changes = [(a.kind, a.active) for a in alarm_changes(events) if a.kind is AlarmKind.NEEDS_ZERO]
    assert changes and changes[0] == (AlarmKind.NEEDS_ZERO, True)
    assert not measurements(events)


def test_heft_replay_of_a_missing_file_is_one_clear_line(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    # QA: it printed a raw "[Errno 2] ...".
    config = tmp_path / "station.toml"
    config.write_text(station_toml(port="/dev/null", db=tmp_path / "none.db"))
    missing = tmp_path / "no-such-run.jsonl"
    assert main(["replay", "--config", str(config), str(missing)]) == 2
    err = capsys.readouterr().err.strip()
    assert err == f"heft replay: {missing}: no such recording file"
