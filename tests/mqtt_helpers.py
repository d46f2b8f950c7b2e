"""Helpers for tests of the MQTT link against the real test broker."""

from __future__ import annotations

import asyncio
import contextlib
import io
import time
import uuid
from collections.abc import AsyncIterator, Callable
from dataclasses import dataclass, field
from typing import Any

import aiomqtt

from heft.daemon.command_api import Command, Reply
from heft.daemon.mqtt_client import cancel_until_done
from heft.daemon.mqtt_link import MqttLink
from heft.daemon.mqtt_settings import MqttSettings
from tests.mqtt_broker import Broker


def unique_root() -> str:
    """A topic root no other test uses, so retained messages never leak between tests."""
    return f"heft-test-{uuid.uuid4().hex[:10]}"


def settings_for(broker: Broker, **overrides: object) -> MqttSettings:
    values: dict[str, object] = {
        "host": broker.host,
        "port": broker.port,
        "topic_root": unique_root(),
        "keepalive_s": 5,
    }
    values.update(overrides)
    return MqttSettings.model_validate(values)


async def wait_until(
    condition: Callable[[], bool], timeout_s: float = 15.0, what: str = "condition"
) -> None:
    """Poll ``condition`` until it holds; fail naming ``what`` after a generous timeout."""
    deadline = time.monotonic() + timeout_s
    while not condition():
        if time.monotonic() > deadline:
            raise AssertionError(f"timed out after {timeout_s} s waiting for {what}")
        await asyncio.sleep(0.02)


def task_stacks() -> str:
    """Every task's stack on the running loop (where a hung shutdown waits)."""
    out = io.StringIO()
    for task in asyncio.all_tasks():
        out.write(f"--- {task.get_name()} (cancelling={task.cancelling()})\n")
        task.print_stack(file=out)
    return out.getvalue()


async def stop_task(
    task: asyncio.Task[Any], what: str, timeout_s: float = 30.0, *, reraise: bool = True
) -> None:
    """Cancel ``task`` once and wait for it; fail naming ``what`` if it does not stop in time.

    One cancel, as a real shutdown sends: a task that loses it is a bug the test must show,
    with every task's stack. It is then cancelled until it ends so the next test starts clean.
    Re-raises the task's own error, if it ended with one (unless ``reraise`` is False).
    """
    task.cancel()
    done, _ = await asyncio.wait({task}, timeout=timeout_s)
    if not done:
        stacks = task_stacks()
        await cancel_until_done([task])
        raise AssertionError(f"{what} did not stop within {timeout_s} s of a cancel:\n{stacks}")
    if reraise and not task.cancelled():
        task.result()


@dataclass
class Collector:
    """Every message received on some filters, in arrival order."""

    messages: list[aiomqtt.Message] = field(default_factory=list)

    def on(self, topic: str) -> list[aiomqtt.Message]:
        return [m for m in self.messages if m.topic.matches(topic)]

    def payloads(self, topic: str) -> list[bytes]:
        return [bytes(m.payload) for m in self.on(topic)]  # type: ignore[arg-type]


@contextlib.asynccontextmanager
async def collecting(
    broker: Broker,
    *filters: str,
    identifier: str | None = None,
    protocol: aiomqtt.ProtocolVersion = aiomqtt.ProtocolVersion.V5,
    port: int | None = None,
    **client_options: Any,
) -> AsyncIterator[tuple[aiomqtt.Client, Collector]]:
    """A subscribed client whose messages land in a Collector while the block runs."""
    collector = Collector()
    async with aiomqtt.Client(
        broker.host,
        port or broker.port,
        identifier=identifier or f"collector-{uuid.uuid4().hex[:8]}",
        protocol=protocol,
        **client_options,
    ) as client:
        for f in filters:
            await client.subscribe(f, qos=1)

        async def pump() -> None:
            async for msg in client.messages:
                collector.messages.append(msg)

        task = asyncio.create_task(pump())
        try:
            yield client, collector
        finally:
            with contextlib.suppress(aiomqtt.MqttError):
                await stop_task(task, "the test's collecting client")


@contextlib.asynccontextmanager
async def running(link: MqttLink) -> AsyncIterator[asyncio.Task[None]]:
    """Run the link in a task for the block; wait until it is connected first."""
    task = asyncio.create_task(link.run())
    try:
        await asyncio.wait_for(link.wait_connected(), timeout=15)
        yield task
    finally:
        await stop_task(task, "MqttLink.run")


class RecordingHandler:
    """Stands in for the service's command handler: records commands, answers ok."""

    def __init__(self) -> None:
        self.commands: list[Command] = []

    async def __call__(self, command: Command) -> Reply:
        self.commands.append(command)
        return Reply(ok=True, message="done", data={"seen": len(self.commands)})
