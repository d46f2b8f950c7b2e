"""The one way heft opens an MQTT connection, and the asyncio helpers its sessions share.

Both the station's link and the dashboard (``heft dash``) build their clients here from
:class:`~heft.daemon.mqtt_settings.MqttSettings`, so broker address, credentials and TLS (CA file,
client certificate, insecure flag) mean the same on both sides.
"""

from __future__ import annotations

import asyncio
import socket
from collections.abc import Coroutine, Iterable
from typing import Any

import aiomqtt

from heft.daemon.mqtt_settings import MqttSettings

OPERATION_TIMEOUT_S = 10.0  # no healthy broker takes this long to acknowledge


def tls_parameters(settings: MqttSettings) -> aiomqtt.TLSParameters | None:
    """TLS parameters from the settings (None: plain TCP)."""
    tls = settings.tls
    if tls is None:
        return None
    return aiomqtt.TLSParameters(
        ca_certs=str(tls.ca_file) if tls.ca_file else None,
        certfile=str(tls.cert_file) if tls.cert_file else None,
        keyfile=str(tls.key_file) if tls.key_file else None,
    )


def make_client(
    settings: MqttSettings,
    client_id: str,
    *,
    will: aiomqtt.Will | None = None,
) -> aiomqtt.Client:
    """A fresh MQTT 5 client; make one per connection attempt so no stale paho state survives.

    Always a clean start: a command queued while the station was away (a tare from an hour ago)
    must not run when it returns, and a dashboard wants the retained state, not a backlog.
    Durability of measurements comes from the station's outbox, not from a broker session.
    """
    s = settings
    return aiomqtt.Client(
        s.host,
        s.port,
        username=s.username,
        password=s.password.get_secret_value() if s.password else None,
        identifier=client_id,
        protocol=aiomqtt.ProtocolVersion.V5,
        clean_start=True,
        will=will,
        keepalive=s.keepalive_s,
        tls_params=tls_parameters(s),
        tls_insecure=s.tls.insecure if s.tls is not None else None,
        # Bounds every publish/subscribe; also ends a session wedged by a socket closed
        # under the client mid-handshake (seen when two clients share one id).
        timeout=OPERATION_TIMEOUT_S,
        # Without TCP_NODELAY, Nagle's algorithm holds a small publish until the broker has
        # ACKed the previous one (a delayed ACK waits up to 40 ms): measured 48 ms against
        # 6 ms per measurement (tests/bench/pipeline_bench.py, docs/performance.md).
        socket_options=((socket.IPPROTO_TCP, socket.TCP_NODELAY, 1),),
    )


def raise_if_cancel_requested() -> None:
    """Raise CancelledError if the current task was cancelled and the cancel got lost.

    On Python 3.11 ``asyncio.wait_for`` returns its awaitable's result instead of raising when
    the task is cancelled in the same loop iteration that the awaitable completes (CPython
    gh-86296, fixed in 3.12). aiomqtt bounds every publish and subscribe with ``wait_for``, so a
    cancel arriving just as a PUBACK does is swallowed; a loop that then waits without a
    deadline never ends. The request is still counted by ``Task.cancelling()``: check it.
    """
    task = asyncio.current_task()
    if task is not None and task.cancelling():
        raise asyncio.CancelledError


async def cancel_until_done(tasks: Iterable[asyncio.Task[Any]], retry_s: float = 1.0) -> None:
    """Cancel tasks and wait until all have finished, cancelling again any that ran on.

    Only for tasks without a graceful shutdown of their own: a repeated cancel cuts one short.
    A task may swallow one cancel (see :func:`raise_if_cancel_requested`); it cannot swallow
    them all, so this always ends.
    """
    pending = set(tasks)
    while pending:
        for task in pending:
            task.cancel()
        _, pending = await asyncio.wait(pending, timeout=retry_s)


async def first_error(*coros: Coroutine[Any, Any, None]) -> None:
    """Run coroutines together until the first one ends; cancel the rest; re-raise its error."""
    tasks = [asyncio.create_task(c) for c in coros]
    try:
        done, _ = await asyncio.wait(tasks, return_when=asyncio.FIRST_COMPLETED)
    finally:
        # Not gather(): one cancel can be lost in aiomqtt (raise_if_cancel_requested), and a
        # lost cancel here left the link's shutdown waiting forever on a connected client.
        await cancel_until_done(tasks)
        for task in tasks:  # retrieve every outcome: none is logged as "never retrieved"
            if not task.cancelled():
                task.exception()
    for task in done:
        if not task.cancelled() and (err := task.exception()) is not None:
            raise err
