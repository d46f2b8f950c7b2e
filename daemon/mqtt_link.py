"""The station's MQTT link: one long-lived task that publishes state and answers commands.

Data flow: the service stores a measurement (``Store.add_measurement``) and then announces it on
the event bus; the link drains the database outbox, publishes each row at QoS 1 and marks it sent
only after ``publish()`` returned, i.e. after the broker's PUBACK. Anything not acknowledged when
the connection drops stays in the outbox and goes out again after the reconnect; the payload
carries the measurement ``id`` so consumers drop the duplicates this can cause.

Everything else the link publishes is state it keeps in memory from bus events (capture state,
device status, active alarms, the newest live value per channel); after a reconnect it publishes
that state again, so the broker's retained copies are always current.

Reconnects follow aiomqtt's supported pattern: a loop around ``async with aiomqtt.Client(...)``
that catches ``MqttError``. Failed connection attempts back off exponentially with jitter
(tenacity); a session that was up and then dropped restarts the backoff from its shortest delay.
"""

from __future__ import annotations

import asyncio
import contextlib
import json
import logging
import math
import socket
import time
from collections import deque
from collections.abc import Awaitable, Callable, Coroutine, Iterable
from datetime import UTC, datetime
from typing import Any, Generic, TypeVar

import aiomqtt
from paho.mqtt.packettypes import PacketTypes
from paho.mqtt.properties import Properties
from pydantic import BaseModel
from tenacity import AsyncRetrying, RetryCallState, retry_if_exception_type, wait_exponential_jitter

from heft.daemon.command_api import Command, Reply, parse_command
from heft.daemon.events import (
    Alarm,
    AlarmChanged,
    CaptureStateChanged,
    DeviceStatus,
    Event,
    EventBus,
    LiveReading,
    MeasurementCaptured,
    Subscription,
)
from heft.daemon.mqtt_settings import MqttSettings
from heft.daemon.mqtt_topics import (
    OFFLINE,
    ONLINE,
    AlarmPayload,
    AlarmsPayload,
    CaptureStatePayload,
    DeviceStatusPayload,
    LiveReadingPayload,
    TopicError,
    Topics,
    ha_discovery,
)
from heft.daemon.storage import StorageError, Store
from heft.daemon.version import __version__

log = logging.getLogger(__name__)

CommandHandler = Callable[[Command], Awaitable[Reply]]
MAX_COMMAND_BYTES = 16_384  # a command is a small JSON object; anything bigger is refused
OUTBOX_BATCH = 100
OPERATION_TIMEOUT_S = 10.0  # no healthy broker takes this long to acknowledge
STABLE_SESSION_S = 10.0  # a session shorter than this counts as a failed attempt (backoff)
K = TypeVar("K")
V = TypeVar("V")


class LatestValueThrottle(Generic[K, V]):
    """At most one value per key per ``min_interval_s``; the newest value wins, none is stuck.

    The first value of a quiet key is due at once; values arriving inside the interval replace
    each other and the last one is due when the interval ends, so a channel's final reading is
    always published. Pure: the caller passes the clock.
    """

    def __init__(self, min_interval_s: float) -> None:
        self.min_interval_s = min_interval_s
        self._pending: dict[K, V] = {}
        self._last_sent: dict[K, float] = {}

    def offer(self, key: K, value: V) -> None:
        self._pending[key] = value

    def take_due(self, now: float) -> list[tuple[K, V]]:
        due = [
            (k, v)
            for k, v in self._pending.items()
            if now - self._last_sent.get(k, -math.inf) >= self.min_interval_s
        ]
        for k, _ in due:
            del self._pending[k]
            self._last_sent[k] = now
        return due

    def next_due(self) -> float | None:
        """Clock time at which the next pending value becomes due (None: nothing pending)."""
        if not self._pending:
            return None
        return min(self._last_sent.get(k, -math.inf) + self.min_interval_s for k in self._pending)

    def clear(self) -> None:
        self._pending.clear()


class MqttLink:
    """Publish a station's measurements and state over MQTT and answer its commands.

    Args:
        settings: broker address, credentials, TLS, topic root and behaviour switches.
        station: station id; the link owns the topic subtree ``<topic_root>/<station>/``.
        store: the station database; its outbox is the queue of measurements to publish.
        bus: the service's event bus (live readings, capture state, alarms, device status,
            captured measurements).
        handle_command: called with each valid command; None refuses commands.
        retry_initial_s: shortest delay between failed connection attempts.
        retry_max_s: longest delay between failed connection attempts.
        clock: monotonic clock in seconds (live-reading throttle, session length).
    """

    def __init__(
        self,
        settings: MqttSettings,
        station: str,
        store: Store,
        bus: EventBus,
        handle_command: CommandHandler | None = None,
        *,
        retry_initial_s: float = 0.5,
        retry_max_s: float = 30.0,
        clock: Callable[[], float] = time.monotonic,
    ) -> None:
        self.settings = settings
        self.station = station
        self.topics = Topics(settings.topic_root, station)
        self.client_id = settings.client_id or f"heft-{station}"
        self._store = store
        self._bus = bus
        self._handle_command = handle_command
        self._retry_initial_s = retry_initial_s
        self._retry_max_s = retry_max_s
        self._clock = clock
        # State kept across connections and re-published after each (re)connect.
        self._capture: CaptureStatePayload | None = None
        self._devices: dict[str, DeviceStatusPayload] = {}
        self._alarms: dict[str, Alarm] = {}
        self._alarm_events: deque[AlarmPayload] = deque(maxlen=1000)
        self._dirty_capture = False
        self._dirty_devices: set[str] = set()
        self._dirty_alarms = False
        self._live: LatestValueThrottle[str, LiveReadingPayload] = LatestValueThrottle(
            1.0 / settings.live_max_rate_hz
        )
        self._bad_channels: set[str] = set()
        self._changed = asyncio.Event()
        self._wake = asyncio.Event()
        self._connected = asyncio.Event()
        self.published_measurements = 0  # acknowledged by the broker, this process

    # ------------------------------------------------------------------ public

    @property
    def connected(self) -> bool:
        return self._connected.is_set()

    async def wait_connected(self) -> None:
        await self._connected.wait()

    def wake(self) -> None:
        """A measurement was stored: drain the outbox now (the bus event does this too)."""
        self._wake.set()

    async def run(self) -> None:
        """Keep the link up until cancelled; never returns otherwise."""
        if not self.settings.enabled:
            log.info("MQTT disabled in the config; the link stays idle")
            await asyncio.Event().wait()
        sub = self._bus.subscribe()
        consumer = asyncio.create_task(self._consume_events(sub), name="mqtt-events")
        try:
            try:
                for alarm in await asyncio.to_thread(self._store.active_alarms, self.station):
                    self._alarms.setdefault(alarm.key, alarm)
            except StorageError as err:  # the bus still brings every change from now on
                log.error("cannot restore active alarms: %s", err)
            while True:
                raise_if_cancel_requested()
                retrying = AsyncRetrying(
                    retry=retry_if_exception_type(aiomqtt.MqttError),
                    wait=wait_exponential_jitter(
                        multiplier=self._retry_initial_s,
                        jitter=self._retry_initial_s,  # spread a plant's stations apart
                        max=self._retry_max_s,
                    ),
                    before_sleep=self._log_retry,
                    reraise=True,
                )
                await retrying(self._connect_and_serve)
        finally:
            await cancel_until_done([consumer])
            sub.close()

    # ------------------------------------------------------------------ connection

    def _log_retry(self, state: RetryCallState) -> None:
        wait = state.next_action.sleep if state.next_action else 0.0
        err = state.outcome.exception() if state.outcome else None
        log.warning(
            "MQTT %s:%s: %s; attempt %d, retrying in %.1f s",
            self.settings.host,
            self.settings.port,
            err,
            state.attempt_number,
            wait,
        )

    def make_client(self) -> aiomqtt.Client:
        """A fresh client per connection attempt: no stale paho state survives a reconnect."""
        s = self.settings
        tls_params = None
        tls_insecure = None
        if s.tls is not None:
            tls_params = aiomqtt.TLSParameters(
                ca_certs=str(s.tls.ca_file) if s.tls.ca_file else None,
                certfile=str(s.tls.cert_file) if s.tls.cert_file else None,
                keyfile=str(s.tls.key_file) if s.tls.key_file else None,
            )
            tls_insecure = s.tls.insecure
        return aiomqtt.Client(
            s.host,
            s.port,
            username=s.username,
            password=s.password.get_secret_value() if s.password else None,
            identifier=self.client_id,
            protocol=aiomqtt.ProtocolVersion.V5,
            # Clean start on purpose: a command queued while the station was away (a tare from
            # an hour ago) must not run when it returns. Durability comes from our outbox.
            clean_start=True,
            will=aiomqtt.Will(self.topics.status, OFFLINE, qos=1, retain=True),
            keepalive=s.keepalive_s,
            tls_params=tls_params,
            tls_insecure=tls_insecure,
            # Bounds every publish/subscribe; also ends a session wedged by a socket closed
            # under the client mid-handshake (seen when two clients share one id).
            timeout=OPERATION_TIMEOUT_S,
            # Without TCP_NODELAY, Nagle's algorithm holds a small publish until the broker has
            # ACKed the previous one (a delayed ACK waits up to 40 ms): measured 48 ms against
            # 6 ms per measurement (tests/bench/pipeline_bench.py, docs/performance.md).
            socket_options=((socket.IPPROTO_TCP, socket.TCP_NODELAY, 1),),
        )

    async def _connect_and_serve(self) -> None:
        """One connection. Returns when a session that had been up a while drops.

        Raises MqttError (so the caller backs off) when the connection fails, when a session
        drops soon after it started (a broker that accepts and then disconnects, or another
        client with the same id, must not cause a tight reconnect loop), and when the session
        ends on an unexpected error, which is logged: the link never dies of one.
        """
        client = self.make_client()
        started_at: float | None = None
        try:
            async with client:
                started_at = self._clock()
                log.info(
                    "MQTT connected to %s:%s as %s",
                    self.settings.host,
                    self.settings.port,
                    self.client_id,
                )
                await self._serve(client)
        except aiomqtt.MqttError as err:
            if started_at is None:
                raise
            lasted_s = self._clock() - started_at
            if lasted_s < STABLE_SESSION_S:
                raise aiomqtt.MqttError(
                    f"connection dropped after {lasted_s:.1f} s: {err}"
                ) from err
            log.warning("MQTT connection lost: %s", err)
        except Exception as err:
            log.exception("MQTT link error; reconnecting")
            raise aiomqtt.MqttError(f"link error: {err!r}") from err
        finally:
            self._connected.clear()

    async def _serve(self, client: aiomqtt.Client) -> None:
        t = self.topics
        await client.publish(t.status, ONLINE, qos=1, retain=True)
        await client.subscribe(t.cmd, qos=1)
        if self.settings.homeassistant_discovery:
            await client.subscribe(f"{self.settings.homeassistant_prefix}/status", qos=1)
            await self._publish_discovery(client)
        try:
            last = await asyncio.to_thread(self._store.recent_measurements, 1)
        except StorageError as err:
            log.error("cannot read the last measurement: %s", err)
            last = []
        if last:
            await client.publish(t.measurement_last, _json(last[0]), qos=1, retain=True)
        self._mark_all_dirty()
        raise_if_cancel_requested()  # a cancel lost in a publish above must not start the session
        self._connected.set()
        try:
            await _first_error(
                self._drain_outbox(client),
                self._publish_state(client),
                self._receive(client),
            )
        except asyncio.CancelledError:
            # Orderly shutdown: say so (the will only covers an abrupt loss).
            with contextlib.suppress(Exception):
                async with asyncio.timeout(2):
                    await client.publish(t.status, OFFLINE, qos=1, retain=True)
            raise

    # ------------------------------------------------------------------ measurements

    async def _drain_outbox(self, client: aiomqtt.Client) -> None:
        while True:
            self._wake.clear()  # clear before reading: a store during the read wakes us again
            try:
                rows = await asyncio.to_thread(self._store.outbox_pending, OUTBOX_BATCH)
            except StorageError as err:
                log.error("cannot read the outbox: %s; retrying", err)
                await asyncio.sleep(1.0)
                continue
            if not rows:
                await self._wake.wait()
                continue
            for outbox_id, m in rows:
                await client.publish(self.topics.measurement, _json(m), qos=1)
                # publish() returned: PUBACK arrived. Only now is the row done.
                self.published_measurements += 1
                try:
                    await asyncio.to_thread(self._store.mark_sent, outbox_id)
                except StorageError as err:  # it will be sent again: a duplicate, same id
                    log.error("cannot mark outbox row %d sent: %s", outbox_id, err)
            await client.publish(
                self.topics.measurement_last, _json(rows[-1][1]), qos=1, retain=True
            )

    # ------------------------------------------------------------------ state from the bus

    async def _consume_events(self, sub: Subscription) -> None:
        async for event in sub:
            self.apply_event(event)

    def apply_event(self, event: Event) -> None:
        """Fold one bus event into the state to publish (synchronous, never blocks)."""
        now = datetime.now(UTC)
        if isinstance(event, MeasurementCaptured):
            self.wake()
            return
        if isinstance(event, LiveReading):
            if self._connected.is_set() and event.station == self.station:
                self._live.offer(event.channel, LiveReadingPayload.from_event(event, now))
        elif isinstance(event, CaptureStateChanged):
            self._capture = CaptureStatePayload.from_event(event, now)
            self._dirty_capture = True
        elif isinstance(event, DeviceStatus):
            self._devices[event.device] = DeviceStatusPayload.from_event(event, now)
            self._dirty_devices.add(event.device)
        elif isinstance(event, AlarmChanged):
            alarm = event.alarm
            if alarm.active:
                self._alarms[alarm.key] = alarm
            else:
                self._alarms.pop(alarm.key, None)
            self._alarm_events.append(AlarmPayload.from_alarm(alarm))
            self._dirty_alarms = True
        self._changed.set()

    def alarms_payload(self) -> AlarmsPayload:
        return AlarmsPayload(
            station=self.station,
            time_utc=datetime.now(UTC),
            active=[AlarmPayload.from_alarm(a) for a in self._alarms.values()],
        )

    def _mark_all_dirty(self) -> None:
        self._dirty_capture = self._capture is not None
        self._dirty_devices = set(self._devices)
        self._dirty_alarms = True  # always: replaces a stale retained list after a restart
        self._live.clear()  # readings from before the connection are stale
        self._changed.set()

    async def _publish_state(self, client: aiomqtt.Client) -> None:
        t = self.topics
        while True:
            self._changed.clear()
            if self._dirty_capture and self._capture is not None:
                self._dirty_capture = False
                await client.publish(t.capture, _json(self._capture), qos=1, retain=True)
            while self._dirty_devices:
                name = self._dirty_devices.pop()
                await self._publish_checked(
                    client, t.device, name, _json(self._devices[name]), 1, True
                )
            if self._dirty_alarms:
                self._dirty_alarms = False
                await client.publish(t.alarms, _json(self.alarms_payload()), qos=1, retain=True)
            while self._alarm_events:
                await client.publish(t.alarm_event, _json(self._alarm_events[0]), qos=1)
                self._alarm_events.popleft()
            for channel, payload in self._live.take_due(self._clock()):
                await self._publish_checked(client, t.live, channel, _json(payload), 0, False)
            due = self._live.next_due()
            timeout = None if due is None else max(0.0, due - self._clock())
            # asyncio.timeout, not wait_for: see raise_if_cancel_requested.
            with contextlib.suppress(TimeoutError):
                async with asyncio.timeout(timeout):
                    await self._changed.wait()

    async def _publish_checked(
        self,
        client: aiomqtt.Client,
        build_topic: Callable[[str], str],
        name: str,
        payload: str,
        qos: int,
        retain: bool,
    ) -> None:
        """Publish to a topic built from a device-supplied name; log a bad name once, skip it."""
        try:
            topic = build_topic(name)
        except TopicError as err:
            if str(err) not in self._bad_channels:
                self._bad_channels.add(str(err))
                log.error("not published: %s", err)
            return
        await client.publish(topic, payload, qos=qos, retain=retain)

    # ------------------------------------------------------------------ commands

    async def _receive(self, client: aiomqtt.Client) -> None:
        ha_status = f"{self.settings.homeassistant_prefix}/status"
        async for msg in client.messages:
            if msg.topic.matches(self.topics.cmd):
                await self._answer(client, msg)
            elif (
                self.settings.homeassistant_discovery
                and msg.topic.matches(ha_status)
                and _text(msg.payload).strip() == "online"
            ):
                await self._publish_discovery(client)

    async def _answer(self, client: aiomqtt.Client, msg: aiomqtt.Message) -> None:
        reply = await self.reply_to(_raw(msg.payload))
        props = msg.properties
        response_topic = getattr(props, "ResponseTopic", None) if props else None
        correlation = getattr(props, "CorrelationData", None) if props else None
        out_props = None
        if correlation is not None:
            out_props = Properties(PacketTypes.PUBLISH)  # type: ignore[no-untyped-call]  # paho is untyped
            out_props.CorrelationData = correlation
        target = self.topics.cmd_reply
        if isinstance(response_topic, str) and _valid_publish_topic(response_topic):
            target = response_topic
        await client.publish(target, _json(reply), qos=1, properties=out_props)

    async def reply_to(self, payload: bytes) -> Reply:
        """The reply to one raw command payload (validated, refused or handled)."""
        command_name, request_id = _request_meta(payload)
        echo = {"command": command_name, "request_id": request_id}
        if len(payload) > MAX_COMMAND_BYTES:
            return Reply(
                ok=False,
                **echo,
                message=f"bad command: payload: {len(payload)} bytes, expected at most "
                f"{MAX_COMMAND_BYTES}",
            )
        if not self.settings.commands_enabled:
            return Reply(
                ok=False,
                **echo,
                message=f"refused: commands are disabled on station {self.station} "
                "(mqtt.commands_enabled = false)",
            )
        parsed = parse_command(payload)
        if isinstance(parsed, Reply):
            return parsed.model_copy(update=echo)
        echo = {"command": parsed.command, "request_id": parsed.request_id}
        if self._handle_command is None:
            return Reply(
                ok=False, **echo, message=f"refused: station {self.station} takes no commands"
            )
        try:
            reply = await self._handle_command(parsed)
        except Exception as err:  # a failing handler must not take the link down
            log.exception("command %s failed", parsed.command)
            return Reply(ok=False, **echo, message=f"{parsed.command} failed: {err}")
        return reply.model_copy(
            update={
                "command": reply.command or parsed.command,
                "request_id": parsed.request_id,
            }
        )

    # ------------------------------------------------------------------ Home Assistant

    async def _publish_discovery(self, client: aiomqtt.Client) -> None:
        topic, payload = ha_discovery(self.topics, self.settings.homeassistant_prefix, __version__)
        await client.publish(topic, json.dumps(payload), qos=1, retain=True)


# ---------------------------------------------------------------------- helpers


def _json(model: BaseModel) -> str:
    return model.model_dump_json()


def _raw(payload: Any) -> bytes:
    if isinstance(payload, bytes | bytearray):
        return bytes(payload)
    if payload is None:
        return b""
    return str(payload).encode()


def _text(payload: Any) -> str:
    return _raw(payload).decode("utf-8", errors="replace")


def _request_meta(payload: bytes) -> tuple[str | None, str | None]:
    """Best-effort command name and request id from a payload, even an invalid one."""
    try:
        obj = json.loads(payload)
    except (ValueError, UnicodeDecodeError):
        return None, None
    if not isinstance(obj, dict):
        return None, None
    command, request_id = obj.get("command"), obj.get("request_id")
    return (
        command if isinstance(command, str) else None,
        request_id if isinstance(request_id, str) else None,
    )


def _valid_publish_topic(topic: str) -> bool:
    return bool(topic) and not any(c in topic for c in "+#\x00") and len(topic.encode()) < 65536


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


async def _first_error(*coros: Coroutine[Any, Any, None]) -> None:
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
