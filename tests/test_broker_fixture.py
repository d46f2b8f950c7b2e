"""The test broker itself: a message published at QoS 1 comes back to a subscriber."""

from __future__ import annotations

import asyncio

import aiomqtt

from tests.mqtt_broker import Broker


async def test_round_trip_through_real_broker(broker: Broker) -> None:
    async with aiomqtt.Client(broker.host, port=broker.port, identifier="t-sub") as sub:
        await sub.subscribe("heft-test/#", qos=1)
        async with aiomqtt.Client(broker.host, port=broker.port, identifier="t-pub") as pub:
            await pub.publish("heft-test/x", b"hello", qos=1)
        msg = await asyncio.wait_for(anext(aiter(sub.messages)), timeout=5)
        assert msg.payload == b"hello"
        assert str(msg.topic) == "heft-test/x"
