"""The link stops when cancelled, even when a cancel gets lost on the way.

On Python 3.11 ``asyncio.wait_for`` (which aiomqtt uses for every publish and subscribe) returns
normally when its task is cancelled in the same loop iteration the awaited PUBACK arrives
(CPython gh-86296, fixed in 3.12). The link's session tasks then went back to waiting with no
deadline and the service's shutdown hung, with the client still connected.
"""

from __future__ import annotations

import asyncio
import random
import sys
import time
from pathlib import Path

from heft.daemon.events import EventBus, LiveReading, MeasurementCaptured
from heft.daemon.mqtt_client import cancel_until_done, first_error, raise_if_cancel_requested
from heft.daemon.mqtt_link import MqttLink
from heft.daemon.storage import Store
from heft.drivers.reading import Flag
from tests.mqtt_broker import Broker
from tests.mqtt_helpers import collecting, settings_for, stop_task, wait_until
from tests.sample_records import make_measurement

LOSES_CANCELS = sys.version_info < (3, 12)  # asyncio.wait_for swallows a coincident cancel


async def test_a_session_task_that_lost_its_cancel_still_stops() -> None:
    acked = asyncio.Event()
    cancels_seen: list[int] = []

    async def publisher() -> None:
        await asyncio.wait_for(acked.wait(), 10)  # as aiomqtt waits for a PUBACK
        task = asyncio.current_task()
        assert task is not None
        cancels_seen.append(task.cancelling())
        await asyncio.Event().wait()  # as the outbox loop waits for the next measurement

    async def session_ends() -> None:
        acked.set()  # the PUBACK lands in the very iteration the session ends

    # Bounded: before the fix this waited forever on the publisher.
    await asyncio.wait_for(first_error(publisher(), session_ends()), timeout=10)
    if LOSES_CANCELS:
        assert cancels_seen == [1]  # the scenario really lost one cancel


async def test_raise_if_cancel_requested_honours_a_lost_cancel() -> None:
    acked = asyncio.Event()
    went_on = False

    async def waits_then_checks() -> None:
        nonlocal went_on
        await asyncio.wait_for(acked.wait(), 10)
        went_on = True
        raise_if_cancel_requested()
        await asyncio.Event().wait()

    task = asyncio.create_task(waits_then_checks())
    await asyncio.sleep(0)  # let it start waiting
    acked.set()
    task.cancel()
    await asyncio.wait({task}, timeout=10)
    assert task.cancelled()
    assert went_on == LOSES_CANCELS


async def test_cancel_until_done_ends_a_task_that_swallows_cancels() -> None:
    swallowed = 0

    async def stubborn() -> None:
        nonlocal swallowed
        while swallowed < 3:
            try:
                await asyncio.sleep(10)
            except asyncio.CancelledError:
                swallowed += 1
        await asyncio.sleep(10)

    task = asyncio.create_task(stubborn())
    await asyncio.sleep(0)
    started = time.monotonic()
    await asyncio.wait_for(cancel_until_done([task], retry_s=0.05), timeout=10)
    assert task.cancelled() and swallowed == 3
    assert time.monotonic() - started < 10


async def test_link_stops_when_cancelled_among_publishes(broker: Broker, tmp_path: Path) -> None:
    """Cancel a running link at random moments while it publishes live values and a measurement.

    Before the fix about one cancel in eight, on this machine, left it running forever (measured
    with a script doing the same). Bounded: 12 rounds, each must stop within 15 s.
    """
    rng = random.Random(20261201)
    for round_no in range(12):
        bus = EventBus()
        with Store(tmp_path / f"round{round_no}.db") as store:
            link = MqttLink(settings_for(broker), "bench-1", store, bus)
            async with collecting(broker, link.topics.measurement) as (_, got):
                task = asyncio.create_task(link.run())
                await asyncio.wait_for(link.wait_connected(), timeout=15)
                m = make_measurement(round_no + 1)
                store.add_measurement(m)
                bus.publish(MeasurementCaptured(measurement=m))
                done_feeding = asyncio.Event()

                async def feed_live(
                    bus: EventBus = bus, done: asyncio.Event = done_feeding
                ) -> None:
                    value_g = 100.0
                    while not done.is_set():
                        bus.publish(
                            LiveReading(
                                station="bench-1", channel="beam/0", t_mono_s=time.monotonic(),
                                value_g=value_g, flags=Flag.STABLE,
                            )
                        )
                        value_g += 0.1
                        await asyncio.sleep(0.003)

                feeder = asyncio.create_task(feed_live())
                try:
                    await wait_until(lambda: bool(got.messages), what="the measurement")
                    await asyncio.sleep(rng.uniform(0.0, 0.02))
                    await stop_task(task, f"MqttLink.run (round {round_no})", timeout_s=15)
                finally:
                    done_feeding.set()
                    await feeder
