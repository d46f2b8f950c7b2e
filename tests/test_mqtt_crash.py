"""kill -9 of a station mid-burst: everything MQTT delivered is in a sound database."""

from __future__ import annotations

import asyncio
import json
import os
import signal
import sys
from pathlib import Path

from heft.daemon.storage import Store
from tests.mqtt_broker import Broker
from tests.mqtt_helpers import collecting, settings_for, wait_until

ROOT = Path(__file__).resolve().parents[1]

# A station in miniature: the store and the MQTT link of the real service, fed a burst of
# captures as fast as it can store them (at most 200, so it ends by itself if never killed).
STATION = """
import asyncio, sys
from heft.daemon.events import EventBus, MeasurementCaptured
from heft.daemon.mqtt_link import MqttLink
from heft.daemon.mqtt_settings import MqttSettings
from heft.daemon.storage import Store
from tests.sample_records import make_measurement

async def main() -> None:
    store = Store(sys.argv[2])
    bus = EventBus()
    link = MqttLink(MqttSettings.model_validate_json(sys.argv[1]), "bench-1", store, bus)
    task = asyncio.create_task(link.run())
    await link.wait_connected()
    for seq in range(1, 201):
        m = make_measurement(seq)
        await asyncio.to_thread(store.add_measurement, m)
        bus.publish(MeasurementCaptured(measurement=m))
        await asyncio.sleep(0.005)
    await task

asyncio.run(main())
"""


async def test_kill_9_mid_burst_keeps_everything_mqtt_delivered(
    broker: Broker, tmp_path: Path
) -> None:
    settings = settings_for(broker)
    topic = f"{settings.topic_root}/bench-1/measurement"
    db = tmp_path / "station.db"
    async with collecting(broker, topic) as (_, got):
        proc = await asyncio.create_subprocess_exec(
            sys.executable,
            "-c",
            STATION,
            settings.model_dump_json(),
            str(db),
            cwd=ROOT,
            env={**os.environ, "PYTHONPATH": str(ROOT)},
        )
        try:
            await wait_until(lambda: len(got.messages) >= 40, timeout_s=30, what="40 on MQTT")
            proc.send_signal(signal.SIGKILL)
            assert await asyncio.wait_for(proc.wait(), timeout=10) == -signal.SIGKILL
        finally:
            if proc.returncode is None:
                proc.kill()
                await proc.wait()
        delivered = {json.loads(p)["id"] for p in got.payloads(topic)}

    with Store(db) as store:
        assert store.integrity_check() == "ok"
        stored = {str(m.id) for m in store.measurements()}
        pending = {str(m.id) for _, m in store.outbox_pending(limit=1000)}
    assert delivered <= stored  # nothing reached MQTT that is not in the database
    assert len(stored) < 200  # the kill landed mid-burst
    # A row is marked sent only after the broker acknowledged it, and the subscriber was there
    # before the first publish, so every row marked sent was delivered; the rest stay queued.
    assert stored - pending <= delivered
