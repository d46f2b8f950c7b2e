"""Acknowledge after commit: a collector killed before its PUBACK gets the message again.

A real Mosquitto, a real PostgreSQL and a collector in a child process that is SIGKILLed after
receiving a measurement. The child subscribes with an MQTT 5 shared subscription
(``$share/<group>/<root>/+/measurement``) and a persistent session (clean start off, session
expiry set). After it received the message it makes a QoS 1 round trip of its own, so any PUBACK
it was going to send has reached the broker before the kill (one TCP stream, processed in order).

- manual acknowledgement (heft.daemon.plant.mqtt_ack): the message comes again when the
  collector's id reconnects, is stored, acknowledged, and does not come a third time;
- automatic acknowledgement (aiomqtt's default), the control: the message is gone.
"""

from __future__ import annotations

import asyncio
import json
import sys
import uuid
from pathlib import Path
from typing import Any

import aiomqtt
import psycopg
import pytest

from heft.daemon.plant.mqtt_ack import ack, collector_client, shared_filter
from heft.daemon.plant.writer import Outcome, write_measurement
from tests.mqtt_broker import Broker
from tests.sample_records import make_measurement

ROOT = Path(__file__).resolve().parent.parent
GROUP = "plant"
WAIT_S = 20.0  # generous bound for each step on a loaded machine


async def _child(
    host: str, port: int, identifier: str, root: str, topic_filter: str, mode: str
) -> None:
    """The collector that dies: receives, does not store, never acknowledges (manual mode)."""
    client = collector_client(host, port, identifier, session_expiry_s=600)
    if mode == "auto":
        client._client.manual_ack_set(False)  # aiomqtt's default behaviour, for the control
    async with client:
        await client.subscribe(topic_filter, qos=1)
        print("subscribed", flush=True)
        async for message in client.messages:
            print(json.loads(bytes(message.payload))["seq"], flush=True)
            await client.publish(f"{root}/probe", b"round trip", qos=1)  # returns on PUBACK
            print("round-trip", flush=True)
            await asyncio.Event().wait()  # killed here


async def _line(proc: asyncio.subprocess.Process) -> str:
    assert proc.stdout is not None
    raw = await asyncio.wait_for(proc.stdout.readline(), WAIT_S)
    assert raw, "the collector child ended early"
    return raw.decode().strip()


async def publish_measurement(broker: Broker, root: str, seq: int) -> str:
    payload = make_measurement(seq).model_dump_json()
    async with aiomqtt.Client(broker.host, broker.port, identifier=f"station-{uuid.uuid4()}") as c:
        await c.publish(f"{root}/bench-1/measurement", payload, qos=1)
    return payload


async def next_message(client: aiomqtt.Client) -> aiomqtt.Message:
    async def first() -> aiomqtt.Message:
        async for message in client.messages:
            return message
        raise AssertionError("message stream ended")

    return await asyncio.wait_for(first(), WAIT_S)


async def kill_after_receiving(
    broker: Broker, identifier: str, root: str, mode: str, topic_filter: str | None = None
) -> str:
    """Run the child, publish seq 1, wait until the child holds it, SIGKILL the child."""
    code = (
        "import asyncio, sys; from tests.test_plant_mqtt_ack import _child; "
        "asyncio.run(_child(sys.argv[1], int(sys.argv[2]), *sys.argv[3:]))"
    )
    topic_filter = topic_filter or shared_filter(GROUP, root)
    proc = await asyncio.create_subprocess_exec(
        sys.executable, "-c", code, broker.host, str(broker.port), identifier, root, topic_filter,
        mode, cwd=ROOT, stdout=asyncio.subprocess.PIPE,
    )  # fmt: skip
    try:
        assert await _line(proc) == "subscribed"
        payload = await publish_measurement(broker, root, 1)
        assert await _line(proc) == "1"
        assert await _line(proc) == "round-trip"
    finally:
        proc.kill()  # SIGKILL: no DISCONNECT, no PUBACK that was not already sent
        await asyncio.wait_for(proc.wait(), WAIT_S)
    return payload


def _stored_seqs(conn: psycopg.Connection[Any]) -> list[int]:
    return [int(r[0]) for r in conn.execute("SELECT seq FROM measurements ORDER BY seq")]


@pytest.mark.timeout(120)
async def test_unacknowledged_message_comes_back_and_is_stored_once(
    broker: Broker, plant_conn: psycopg.Connection[Any]
) -> None:
    root, identifier = f"heft-ack-{uuid.uuid4().hex[:8]}", f"collector-{uuid.uuid4().hex[:8]}"
    sent = await kill_after_receiving(broker, identifier, root, "manual")

    # The same collector id comes back; it does not even subscribe again: the session kept both
    # the subscription and the unacknowledged message.
    async with collector_client(broker.host, broker.port, identifier, session_expiry_s=600) as c:
        again = await next_message(c)
        assert bytes(again.payload) == sent.encode()
        assert write_measurement(plant_conn, bytes(again.payload)) is Outcome.STORED
        assert ack(c, again)  # only now, after the commit
        await c.publish(f"{root}/probe", b"round trip", qos=1)  # the PUBACK has reached the broker

    # Acknowledged: a reconnect brings the next message, not the first one a third time.
    async with collector_client(broker.host, broker.port, identifier, session_expiry_s=600) as c:
        await publish_measurement(broker, root, 2)
        following = await next_message(c)
        assert json.loads(bytes(following.payload))["seq"] == 2
        assert write_measurement(plant_conn, bytes(following.payload)) is Outcome.STORED
        assert ack(c, following)
    assert _stored_seqs(plant_conn) == [1, 2]


@pytest.mark.timeout(120)
async def test_control_with_automatic_acknowledgement_the_message_is_lost(broker: Broker) -> None:
    root, identifier = f"heft-ack-{uuid.uuid4().hex[:8]}", f"collector-{uuid.uuid4().hex[:8]}"
    await kill_after_receiving(broker, identifier, root, "auto")
    async with collector_client(broker.host, broker.port, identifier, session_expiry_s=600) as c:
        await publish_measurement(broker, root, 2)
        first_after_restart = await next_message(c)
        assert json.loads(bytes(first_after_restart.payload))["seq"] == 2  # seq 1 never returns
        ack(c, first_after_restart)


def test_shared_filter_refuses_wildcards_in_its_levels() -> None:
    assert shared_filter("plant") == "$share/plant/heft/+/measurement"
    assert shared_filter("plant", "larkspur/heft", "alarm/event") == (
        "$share/plant/larkspur/heft/+/alarm/event"
    )
    with pytest.raises(ValueError, match="group: expected a topic level"):
        shared_filter("pl/ant")
    with pytest.raises(ValueError, match="topic_root: expected a topic level"):
        shared_filter("plant", "heft/#")
