"""Single-scale stations: the balance point entered by command, and the shipped example run as
its header says (through heft replay of simulated devices).

Check values: the simulated club's weight and balance point (simulator inputs); Lorythmic points
from domain.md's definition, (M14 - 161 oz*in) / 1.75 oz*in.
"""

from __future__ import annotations

import random
from datetime import UTC, datetime
from pathlib import Path

import pytest

from heft.daemon import command_api as api
from heft.daemon.config import StationConfig, load_config
from heft.daemon.events import MeasurementCaptured
from heft.daemon.pipeline import BenchPipeline, PipelineOutput
from heft.daemon.service import Service
from heft.daemon.storage import Store
from heft.drivers.reading import ClubTag, Flag, Reading, ValueKind

EXAMPLES = Path(__file__).resolve().parent.parent / "examples"
T0 = datetime(2026, 5, 4, 10, 0, tzinfo=UTC)


def qc2_config(tmp_path: Path) -> StationConfig:
    text = (EXAMPLES / "qc-2-single-scale.toml").read_text()
    text = text.replace('path = "/tmp/heft-sim/qc-2.db"', f'path = "{tmp_path / "qc-2.db"}"')
    path = tmp_path / "qc-2.toml"
    path.write_text(text)
    return load_config(path)


def weighing(
    device: str, weight_g: float, on_s: float, off_s: float, end_s: float
) -> list[Reading]:
    """A balance reporting 10 times a second: empty, the club from on_s to off_s, empty."""
    rng = random.Random(5)
    out = []
    for i in range(int(end_s * 10)):
        t = i / 10
        value = (weight_g if on_s <= t < off_s else 0.0) + rng.gauss(0.0, 0.003)
        out.append(Reading(device, 0, t, round(value, 2), ValueKind.GRAMS, "g", Flag.STABLE, b""))
    return out


async def test_set_balance_point_reply_carries_the_value_set(tmp_path: Path) -> None:
    # QA: the reply said "balance_point_in": null once the value had paired with a weighing.
    config = qc2_config(tmp_path)
    service = Service(config)
    pipeline = BenchPipeline(config, lambda: T0)
    service._assemble(pipeline, Store(tmp_path / "heft.db"))  # fed below without ports
    events: list[PipelineOutput] = []
    for r in weighing("balance", 405.0, 1.0, 5.0, 4.0):  # the club still on the balance
        events.extend(pipeline.feed(r))
    assert not any(isinstance(e, MeasurementCaptured) for e in events)  # waits for the BP
    assert service._to_store is not None
    reply = await service.handle_command(
        api.SetBalancePoint(command="set_balance_point", balance_point="29.2in")
    )
    assert reply.ok, reply.message
    assert reply.data["balance_point_in"] == pytest.approx(29.2)
    assert "29.20 in" in reply.message
    (m,) = [service._to_store.get_nowait()]  # the weighing paired and went to storage
    assert m.balance_point_in == pytest.approx(29.2)
    assert m.total_weight_g == pytest.approx(405.0, abs=0.01)


def test_a_card_carrying_the_club_id_and_its_balance_point(tmp_path: Path) -> None:
    # The form the qc-2 example's simulated scanner sends ("<club id> BP:<length>").
    pipeline = BenchPipeline(qc2_config(tmp_path), lambda: T0)
    events = pipeline.feed(ClubTag("scanner", 0.5, "LCW 7i-0001 BP:29.2in", b""))
    assert pipeline.club_id == "LCW 7i-0001" and pipeline.balance_point_in == 29.2
    for r in weighing("balance", 405.0, 1.0, 5.0, 6.0):
        events.extend(pipeline.feed(r))
    (m,) = [e.measurement for e in events if isinstance(e, MeasurementCaptured)]
    assert (m.club_id, m.balance_point_in) == ("LCW 7i-0001", 29.2)
    # A balance point alone, and an id alone, still work as before.
    pipeline.feed(ClubTag("scanner", 7.0, "BP:29.5in", b""))
    pipeline.feed(ClubTag("scanner", 7.1, "LCW-0002", b""))
    assert (pipeline.club_id, pipeline.balance_point_in) == ("LCW-0002", 29.5)
