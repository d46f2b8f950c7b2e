"""The calibration part through its seam: a real pipeline, a real SQLite store, no service.

The window's time is passed by feeding the simulated beam's bytes into the pipeline (the seam's
``wait_s``), so every window holds what the bench did in that stretch of bench time.

Check values: the simulated cell's own numbers (drivers/sim/definition_files/beam.json:
418.73 counts per gram and 8453 counts at zero on beam/0); the reference and check masses are the
simulator's inputs, laid over support a (4 in) so beam/0 carries them alone.
"""

from __future__ import annotations

from collections.abc import Iterator
from datetime import UTC, datetime, timedelta
from pathlib import Path

import pytest

from heft.daemon.alarms import AlarmCondition, AlarmManager
from heft.daemon.calibration import CalibrationError
from heft.daemon.calibration_workflow import CalibrationWorkflow, stored_calibrations
from heft.daemon.events import AlarmKind
from heft.daemon.pipeline import BenchPipeline, SelectionError
from heft.daemon.records import CalibrationRecord, ReferenceMass
from heft.daemon.storage import Store
from heft.drivers.registry import create_driver
from heft.drivers.sim.physics import Club, Placement
from tests.service_bench import Chunk, beam_bytes, beam_definition, station_config

NOW = datetime(2026, 5, 4, 9, 0, tzinfo=UTC)
REF_200 = ReferenceMass(mass_g=200.0, weight_class="M1", weight_id="LCW-REF-200")
CHECK_100 = ReferenceMass(mass_g=100.0, weight_class="M1", weight_id="LCW-CHK-100")


class FedBench:
    """A pipeline fed from the simulated beam up to a bench time; the workflow's seam ends."""

    def __init__(self, tmp_path: Path, plan: list[Placement], *, spanned: bool = False) -> None:
        config = station_config(port="/dev/null", db=tmp_path / "heft.db", calibrated=False)
        self.store = Store(tmp_path / "heft.db")
        if spanned:  # spanned in the database, as on a real bench
            for i, ch in enumerate(beam_definition().channels):
                self.store.add_calibration(CalibrationRecord(
                    id=f"test-span-{i}", station="bench-1", channel=f"beam/{i}", kind="span",
                    time_utc=NOW, zero_counts=ch.offset_counts, counts_per_g=ch.counts_per_g,
                    next_due=(NOW + timedelta(days=90)).date(),
                ))
        self.pipeline = BenchPipeline(
            config, lambda: NOW, calibrations=stored_calibrations(self.store, config.channels)
        )
        self.alarms = AlarmManager("bench-1", lambda: NOW)
        self.windows_open: list[set[str]] = []
        self.workflow = CalibrationWorkflow(
            config, self.pipeline, self.store, self.alarms.apply, lambda: NOW,
            wait_s=self.wait_s,
        )
        self._driver = create_driver("beam", "beam")
        self._chunks: Iterator[Chunk] = iter(beam_bytes(plan, 60.0))
        self.t_s = 0.0

    def run_to(self, t_s: float) -> None:
        for chunk in self._chunks:
            for out in self._driver.feed(chunk.data, chunk.t):
                for result in self.pipeline.feed(out):
                    if isinstance(result, AlarmCondition):
                        self.alarms.apply(result)
            if chunk.t >= t_s:
                break
        self.t_s = t_s

    async def wait_s(self, seconds: float) -> None:
        self.windows_open.append(set(self.workflow.busy))
        self.run_to(self.t_s + seconds)


async def test_zero_span_verify_are_kept_and_clear_the_overdue_alarm(tmp_path: Path) -> None:
    plan = [Placement(Club(200.0, 4.0), 3.0, 6.5), Placement(Club(100.0, 4.0), 7.5, 14.0)]
    bench = FedBench(tmp_path, plan)
    wf = bench.workflow
    wf.check_due()  # never spanned: overdue on both channels
    assert bench.alarms.is_active(AlarmKind.CALIBRATION_OVERDUE, "beam/0")
    assert bench.alarms.is_active(AlarmKind.CALIBRATION_OVERDUE, "beam/1")
    bench.run_to(0.5)
    zero = await wf.zero("beam/0")
    assert zero.message.endswith("span next") and zero.record.kind == "zero"
    assert zero.record.zero_counts == pytest.approx(8453, abs=5)
    assert bench.windows_open == [{"beam/0"}] and not wf.busy  # open only while gathering
    bench.run_to(4.3)  # the 200 g reference mass is down and still
    span = await wf.span("beam/0", REF_200)
    assert span.record.counts_per_g == pytest.approx(418.73, rel=1e-3)
    assert bench.pipeline.calibrations["beam/0"] == span.record  # now converts the counts
    assert not bench.alarms.is_active(AlarmKind.CALIBRATION_OVERDUE, "beam/0")
    assert bench.alarms.is_active(AlarmKind.CALIBRATION_OVERDUE, "beam/1")
    bench.run_to(8.8)  # the 100 g check mass
    verify = await wf.verify("beam/0", CHECK_100)
    assert verify.record.passed and verify.record.result_g == pytest.approx(100.0, abs=0.1)
    assert "verify passed" in verify.message
    assert [r.kind for r in bench.store.calibrations("beam/0")] == ["zero", "span", "verify"]
    # A check mass declared wrong by 10 g fails and raises calibration-due on the channel.
    bench.run_to(8.8 + 1.6)
    failed = await wf.verify("beam/0", CHECK_100.model_copy(update={"mass_g": 110.0}))
    assert not failed.record.passed and "verify FAILED" in failed.message
    assert bench.alarms.is_active(AlarmKind.CALIBRATION_DUE, "beam/0")


async def test_a_zero_whose_window_sees_a_club_laid_down_is_refused(tmp_path: Path) -> None:
    bench = FedBench(tmp_path, [Placement(Club(405.0, 29.2), 1.0, 60.0)])
    bench.run_to(0.6)  # the club arrives 0.4 s into the window
    with pytest.raises(CalibrationError, match=r"^beam/1 was moving during the zero: .*hold it"):
        await bench.workflow.zero("beam/1")
    assert bench.store.calibrations("beam/1") == []  # nothing kept
    assert not bench.workflow.busy


async def test_a_zero_with_a_club_on_the_beam_is_refused(tmp_path: Path) -> None:
    bench = FedBench(tmp_path, [Placement(Club(405.0, 29.2), 1.0, 60.0)], spanned=True)
    bench.run_to(6.0)  # captured and resting there
    with pytest.raises(CalibrationError, match="beam/1 has a load on it"):
        await bench.workflow.zero("beam/1")
    assert bench.windows_open == []  # refused before any window
    assert [r.id for r in bench.store.calibrations("beam/1")] == ["test-span-1"]


async def test_span_and_verify_refuse_a_channel_not_ready(tmp_path: Path) -> None:
    bench = FedBench(tmp_path, [])
    bench.run_to(0.5)
    with pytest.raises(CalibrationError, match="beam/0 has no zero"):
        await bench.workflow.span("beam/0", REF_200)
    with pytest.raises(CalibrationError, match="beam/0 has no span yet"):
        await bench.workflow.verify("beam/0", CHECK_100)
    with pytest.raises(SelectionError, match="no channel 'beam/7' in the geometry"):
        await bench.workflow.zero("beam/7")
    assert bench.windows_open == [] and bench.store.calibrations() == []
