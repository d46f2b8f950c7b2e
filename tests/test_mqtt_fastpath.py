"""The link's fast path: a just-committed measurement goes out from the bus event, in order.

Real Mosquitto, real SQLite. The fast path must not reorder a station's measurements when older
rows are still pending, must not publish a row twice when nothing failed, and must mark each row
sent after the broker acknowledged it.
"""

from __future__ import annotations

import json
import sqlite3
from collections.abc import Iterator
from pathlib import Path

import pytest

from daemon.events import EventBus, MeasurementCaptured
from daemon.mqtt_link import MqttLink
from daemon.storage import Store
from tests.mqtt_broker import Broker
from tests.mqtt_helpers import collecting, running, settings_for, wait_until
from tests.sample_records import make_measurement


@pytest.fixture
def store(tmp_path: Path) -> Iterator[Store]:
    s = Store(tmp_path / "fastpath.db")
    yield s
    s.close()


def _ids(payloads: list[bytes]) -> list[str]:
    return [str(json.loads(p)["id"]) for p in payloads]


def _sent_times(path: Path) -> dict[str, str | None]:
    """Outbox ``sent_utc`` per measurement id, read on a connection of our own."""
    with sqlite3.connect(path) as conn:
        rows = conn.execute("SELECT measurement_id, sent_utc FROM outbox").fetchall()
    return {str(mid): sent for mid, sent in rows}


async def test_each_measurement_goes_out_once_from_the_event_and_is_marked_sent(
    broker: Broker, store: Store
) -> None:
    bus = EventBus()
    link = MqttLink(settings_for(broker), "bench-1", store, bus)
    t = link.topics
    ms = [make_measurement(i) for i in range(1, 31)]
    async with collecting(broker, t.measurement) as (_, got), running(link):
        for i, m in enumerate(ms):
            store.add_measurement(m)
            bus.publish(MeasurementCaptured(m))  # as the service does, after the commit
            if i % 3 == 0:  # now and then wait, so single measurements and bursts both occur
                n = i + 1
                await wait_until(lambda n=n: len(got.messages) == n, what=f"measurement {n}")
        await wait_until(lambda: len(got.messages) >= len(ms), what="30 measurements")
        await wait_until(lambda: store.outbox_count() == 0, what="every row marked sent")
        # Every row acknowledged: nothing more may arrive (a duplicate would show up here).
        await wait_until(lambda: link.published_measurements == len(ms), what="all acked")
    assert _ids(got.payloads(t.measurement)) == [str(m.id) for m in ms]  # once each, in order
    assert [msg.qos for msg in got.messages] == [1] * len(ms)
    assert link.published_measurements == len(ms)
    # The fast path was taken (the first may go through the outbox: no seq before it is known).
    assert link.published_direct >= len(ms) - 1
    sent = _sent_times(store.path)
    assert set(sent) == {str(m.id) for m in ms}
    assert all(v is not None for v in sent.values())


async def test_a_backlog_the_bus_never_announced_goes_out_first_in_order(
    broker: Broker, store: Store
) -> None:
    bus = EventBus()
    link = MqttLink(settings_for(broker), "bench-1", store, bus)
    t = link.topics
    ms = [make_measurement(i) for i in range(1, 9)]
    async with collecting(broker, t.measurement) as (_, got), running(link):
        for m in ms[:2]:  # the fast path is running
            store.add_measurement(m)
            bus.publish(MeasurementCaptured(m))
        await wait_until(lambda: len(got.messages) == 2, what="first two")
        await wait_until(lambda: store.outbox_count() == 0, what="first two marked sent")
        for m in ms[2:7]:  # stored with no event: a backlog the link has not heard of
            store.add_measurement(m)
        newest = ms[7]
        store.add_measurement(newest)
        bus.publish(MeasurementCaptured(newest))
        await wait_until(lambda: len(got.messages) >= len(ms), what="all eight")
        await wait_until(lambda: store.outbox_count() == 0, what="backlog drained")
        await wait_until(lambda: link.published_measurements == len(ms), what="all acked")
    assert _ids(got.payloads(t.measurement)) == [str(m.id) for m in ms]
    assert all(v is not None for v in _sent_times(store.path).values())


async def test_events_during_a_backlog_drain_neither_overtake_nor_repeat(
    broker: Broker, store: Store
) -> None:
    backlog = [make_measurement(i) for i in range(1, 151)]  # more than one outbox batch
    for m in backlog:
        store.add_measurement(m)
    bus = EventBus()
    link = MqttLink(settings_for(broker), "bench-1", store, bus)
    t = link.topics
    fresh = [make_measurement(i) for i in range(151, 161)]
    async with collecting(broker, t.measurement) as (_, got), running(link):
        for m in fresh:  # arrive while the backlog is going out
            store.add_measurement(m)
            bus.publish(MeasurementCaptured(m))
        await wait_until(lambda: len(got.messages) >= 160, what="all 160", timeout_s=60)
        await wait_until(lambda: store.outbox_count() == 0, what="outbox drained")
        await wait_until(lambda: link.published_measurements == 160, what="all acked")
    assert _ids(got.payloads(t.measurement)) == [str(m.id) for m in backlog + fresh]
