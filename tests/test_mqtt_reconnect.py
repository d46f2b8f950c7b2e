"""Broker outage mid-run: every measurement stored meanwhile arrives after the broker returns."""

from __future__ import annotations

import asyncio
import contextlib
import json
from collections.abc import AsyncIterator
from pathlib import Path

import aiomqtt
from paho.mqtt.packettypes import PacketTypes
from paho.mqtt.properties import Properties

from heft.daemon.events import EventBus, MeasurementCaptured
from heft.daemon.measurement import Measurement
from heft.daemon.mqtt_client import cancel_until_done
from heft.daemon.mqtt_link import MqttLink
from heft.daemon.storage import Store
from tests.mqtt_broker import Broker
from tests.mqtt_helpers import settings_for, stop_task, wait_until
from tests.sample_records import make_measurement


@contextlib.asynccontextmanager
async def historian(
    broker: Broker, topic: str, may_connect: asyncio.Event | None = None
) -> AsyncIterator[list[bytes]]:
    """A plant consumer with a persistent session (MQTT 5 session expiry) that reconnects.

    With a persistent session the broker queues QoS 1 messages for it while it is away. It
    connects only while ``may_connect`` is set, so a test can keep it away on purpose.
    """
    received: list[bytes] = []
    if may_connect is None:
        may_connect = asyncio.Event()
        may_connect.set()
    gate = may_connect

    async def loop() -> None:
        props = Properties(PacketTypes.CONNECT)
        props.SessionExpiryInterval = 3600
        while True:
            await gate.wait()
            try:
                async with aiomqtt.Client(
                    broker.host,
                    broker.port,
                    identifier="larkspur-historian",
                    protocol=aiomqtt.ProtocolVersion.V5,
                    clean_start=False,
                    properties=props,
                    keepalive=5,
                ) as client:
                    await client.subscribe(topic, qos=1)
                    async for msg in client.messages:
                        received.append(bytes(msg.payload))  # type: ignore[arg-type]
            except aiomqtt.MqttError:
                await asyncio.sleep(0.2)

    task = asyncio.create_task(loop())
    try:
        yield received
    finally:
        # The test's own consumer, not the code under test: a cancel lost in its subscribe
        # (raise_if_cancel_requested) would leave it in ``client.messages``; repeat it.
        await cancel_until_done([task])


async def test_broker_stopped_mid_run_loses_nothing(broker: Broker, tmp_path: Path) -> None:
    # Restart the fixture's broker with persistence so sessions survive its own restart.
    data_dir = tmp_path / "mosquitto-data"
    data_dir.mkdir()
    data_dir.chmod(0o777)  # mosquitto drops to its own user when started as root
    broker.stop()
    broker.extra_conf = f"persistence true\npersistence_location {data_dir}/\n"
    broker.start()

    bus = EventBus()
    with Store(tmp_path / "outage.db") as store:
        link = MqttLink(
            settings_for(broker), "bench-1", store, bus, retry_initial_s=0.2, retry_max_s=1.0
        )
        task = asyncio.create_task(link.run())
        added: list[Measurement] = []

        def capture(seq: int) -> None:
            m = make_measurement(seq)
            store.add_measurement(m)  # durable first ...
            bus.publish(MeasurementCaptured(measurement=m))  # ... then announced
            added.append(m)

        try:
            may_connect = asyncio.Event()
            may_connect.set()
            async with historian(broker, link.topics.measurement, may_connect) as received:
                await wait_until(lambda: link.connected, what="link connected")
                for seq in range(1, 6):
                    capture(seq)
                await wait_until(lambda: len(received) >= 5, what="first five measurements")

                broker.stop()
                await wait_until(lambda: not link.connected, what="link noticing the outage")
                for seq in range(6, 16):  # captures go on while the broker is away
                    capture(seq)
                    await asyncio.sleep(0.2)
                # Not acknowledged, so still queued in the database.
                assert store.outbox_count() == 10

                may_connect.clear()  # keep the consumer away until the station is done
                broker.start()  # same port
                for seq in range(16, 21):
                    capture(seq)
                # Every row acknowledged by the broker: the station's part is done, and what
                # the consumer gets now comes from its persistent session on the broker.
                await wait_until(
                    lambda: store.outbox_count() == 0, timeout_s=30, what="outbox drained"
                )
                outage_ids = {str(m.id) for m in added[5:]}
                assert not outage_ids & {json.loads(p)["id"] for p in received}
                may_connect.set()
                want = {str(m.id) for m in added}
                await wait_until(
                    lambda: {json.loads(p)["id"] for p in received} >= want,
                    timeout_s=30,
                    what="all 20 measurements after the outage",
                )
        finally:
            await stop_task(task, "MqttLink.run")

    by_id: dict[str, set[bytes]] = {}
    for p in received:
        by_id.setdefault(json.loads(p)["id"], set()).add(p)
    assert set(by_id) == want  # none lost, nothing foreign
    assert all(len(v) == 1 for v in by_id.values())  # duplicates only as identical copies
    assert [Measurement.model_validate_json(next(iter(by_id[str(m.id)]))) for m in added] == added
