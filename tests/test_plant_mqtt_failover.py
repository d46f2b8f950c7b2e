"""Which subscription lets the plant survive a dead collector (real Mosquitto, real PostgreSQL).

- A shared subscription does not: Mosquitto (2.0) keeps dealing messages to a member whose
  persistent session is offline, and keeps the one it holds unacknowledged; they wait for that
  collector to come back (and are dropped if its session expires first).
- Redundant collectors, each with a plain subscription and a session of its own, do: every
  collector gets every message, the survivors store them, and the idempotent writer makes the
  returning collector's copies no-ops. This is the design docs/plant.md recommends.
- A database outage loses nothing either: no commit, no PUBACK, the broker keeps the message.
"""

from __future__ import annotations

import asyncio
import json
import uuid
from typing import Any

import aiomqtt
import psycopg
import pytest

from heft.daemon.plant.db import connect
from heft.daemon.plant.migrations import migrate
from heft.daemon.plant.mqtt_ack import ack, collector_client, shared_filter
from heft.daemon.plant.writer import Outcome, write_measurement
from tests.mqtt_broker import Broker
from tests.postgres_server import PostgresServer
from tests.test_plant_mqtt_ack import (
    GROUP,
    WAIT_S,
    kill_after_receiving,
    next_message,
    publish_measurement,
)


def _seq(message: aiomqtt.Message) -> int:
    return int(json.loads(bytes(message.payload))["seq"])


async def _store(
    client: aiomqtt.Client, conn: psycopg.Connection[Any] | None, count: int
) -> list[tuple[int, Outcome | None]]:
    """Take ``count`` messages in order; store each (when given a database) and then ack it."""
    taken: list[tuple[int, Outcome | None]] = []
    for _ in range(count):
        message = await next_message(client)
        outcome = write_measurement(conn, bytes(message.payload)) if conn else None
        assert ack(client, message)
        taken.append((_seq(message), outcome))
    return taken


@pytest.mark.timeout(120)
async def test_a_shared_subscription_keeps_dealing_to_a_dead_member(broker: Broker) -> None:
    root = f"heft-share-{uuid.uuid4().hex[:8]}"
    await kill_after_receiving(broker, "collector-a", root, "manual")  # holds seq 1, unacked
    got: dict[str, list[int]] = {"a": [], "b": []}
    all_in = asyncio.Event()

    async def drain(name: str, client: aiomqtt.Client) -> None:
        async for message in client.messages:
            got[name].append(_seq(message))
            ack(client, message)
            if sorted(got["a"] + got["b"]) == list(range(1, 8)):
                all_in.set()

    async with collector_client(broker.host, broker.port, "collector-b") as b:
        await b.subscribe(shared_filter(GROUP, root), qos=1)
        drain_b = asyncio.create_task(drain("b", b))
        for seq in range(2, 8):
            await publish_measurement(broker, root, seq)
        async with collector_client(broker.host, broker.port, "collector-a") as a:
            drain_a = asyncio.create_task(drain("a", a))
            try:
                await asyncio.wait_for(all_in.wait(), WAIT_S)
            finally:
                drain_a.cancel()
                drain_b.cancel()
    assert 1 in got["a"]  # the held message waited for its collector ...
    assert set(got["a"]) & set(range(2, 8))  # ... and so did some published while it was dead
    assert 1 not in got["b"]


@pytest.mark.timeout(120)
async def test_redundant_collectors_store_everything_once_when_one_dies(
    broker: Broker, plant_conn: psycopg.Connection[Any]
) -> None:
    root = f"heft-redundant-{uuid.uuid4().hex[:8]}"
    plain = f"{root}/+/measurement"
    async with collector_client(broker.host, broker.port, "collector-b") as b:
        await b.subscribe(plain, qos=1)
        # Collector A receives seq 1 too, and is killed before storing or acknowledging it.
        await kill_after_receiving(broker, "collector-a", root, "manual", topic_filter=plain)
        for seq in (2, 3):
            await publish_measurement(broker, root, seq)
        assert await _store(b, plant_conn, 3) == [
            (1, Outcome.STORED), (2, Outcome.STORED), (3, Outcome.STORED),
        ]  # fmt: skip
    # A comes back: its session returns seq 1 (unacknowledged) and 2, 3 (queued while it was
    # dead). Each is already stored: the writer answers DUPLICATE and nothing is written twice.
    async with collector_client(broker.host, broker.port, "collector-a") as a:
        assert await _store(a, plant_conn, 3) == [
            (1, Outcome.DUPLICATE), (2, Outcome.DUPLICATE), (3, Outcome.DUPLICATE),
        ]  # fmt: skip
    rows = plant_conn.execute("SELECT seq FROM measurements ORDER BY seq").fetchall()
    assert rows == [(1,), (2,), (3,)]
    assert plant_conn.execute("SELECT * FROM measurement_gaps('bench-1')").fetchall() == []


@pytest.mark.timeout(180)
async def test_a_database_outage_leaves_the_message_with_the_broker(broker: Broker) -> None:
    """The commit fails, so no PUBACK: the message waits in the session until the database is
    back, then is stored (the 'PostgreSQL lost' row of docs/plant.md's failure table)."""
    root = f"heft-dbdown-{uuid.uuid4().hex[:8]}"
    server = PostgresServer()
    try:
        server.init()
        server.start()
        with connect(server.dsn()) as db:
            migrate(db)
        async with collector_client(broker.host, broker.port, "collector-db") as c:
            await c.subscribe(f"{root}/+/measurement", qos=1)
            sent = await publish_measurement(broker, root, 1)
            held = await next_message(c)
            with connect(server.dsn()) as db:
                server.stop()  # the database goes away between receiving and committing
                with pytest.raises(psycopg.OperationalError):
                    write_measurement(db, bytes(held.payload))
        # Not acknowledged; the collector left. The database comes back, and so does it.
        server.start()
        with connect(server.dsn()) as db:
            async with collector_client(broker.host, broker.port, "collector-db") as c:
                assert await _store(c, db, 1) == [(1, Outcome.STORED)]
            stored = db.execute("SELECT payload FROM measurements").fetchall()
        assert [json.dumps(p, sort_keys=True) for (p,) in stored] == [
            json.dumps(json.loads(sent), sort_keys=True)
        ]
    finally:
        server.remove()
