"""The station's MQTT link: one long-lived task that publishes state and answers commands.

Data flow: the service stores a measurement (``Store.add_measurement``) and then announces it on
the event bus; the link drains the database outbox, publishes each row at QoS 1 and marks it sent
only after ``publish()`` returned, i.e. after the broker's PUBACK. Anything not acknowledged when
the connection drops stays in the outbox and goes out again after the reconnect; the payload
carries the measurement ``id`` so consumers drop the duplicates this can cause.

Everything else the link publishes is state it keeps in memory from bus events (capture state,
device status, active alarms, the newest live value per channel); after a reconnect it publishes
that state again, so the broker's retained copies are always current.

Jobs are split by module: ``mqtt_client`` opens connections (shared with the dashboard),
``mqtt_state`` folds bus events into retained state and live readings, ``mqtt_commands`` answers
commands, and every payload comes from the wire codec (``wire``). This module runs the session.

Reconnects follow aiomqtt's supported pattern: a loop around ``async with aiomqtt.Client(...)``
that catches ``MqttError``. Failed connection attempts back off exponentially with jitter
(tenacity); a session that was up and then dropped restarts the backoff from its shortest delay.
"""

from __future__ import annotations

import asyncio
import contextlib
import json
import logging
import time
from collections.abc import Callable

import aiomqtt
from tenacity import AsyncRetrying, RetryCallState, retry_if_exception_type, wait_exponential_jitter

from heft.daemon.command_api import Reply
from heft.daemon.command_auth import CommandAuthority
from heft.daemon.events import Event, EventBus, MeasurementCaptured, Subscription
from heft.daemon.mqtt_client import (
    cancel_until_done,
    first_error,
    make_client,
    raise_if_cancel_requested,
)
from heft.daemon.mqtt_commands import CommandHandler, CommandResponder, raw_payload
from heft.daemon.mqtt_settings import MqttSettings
from heft.daemon.mqtt_state import StatePublisher, send
from heft.daemon.mqtt_topics import Topics, ha_discovery
from heft.daemon.storage import StorageError, Store
from heft.daemon.version import __version__
from heft.daemon.wire import ActiveAlarms, StationStatus, WireCodec

log = logging.getLogger(__name__)

OUTBOX_BATCH = 100
STABLE_SESSION_S = 10.0  # a session shorter than this counts as a failed attempt (backoff)


class MqttLink:
    """Publish a station's measurements and state over MQTT and answer its commands.

    Args:
        settings: broker address, credentials, TLS, topic root and behaviour switches.
        station: station id; the link owns the topic subtree ``<topic_root>/<station>/``.
        store: the station database; its outbox is the queue of measurements to publish.
        bus: the service's event bus (live readings, capture state, alarms, device status,
            captured measurements).
        handle_command: called with each valid command; None refuses commands.
        authority: who may change the station; None refuses state-changing commands.
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
        authority: CommandAuthority | None = None,
        retry_initial_s: float = 0.5,
        retry_max_s: float = 30.0,
        clock: Callable[[], float] = time.monotonic,
    ) -> None:
        self.settings = settings
        self.station = station
        self.topics = Topics(settings.topic_root, station)
        self.codec = WireCodec(settings.topic_root)
        self.client_id = settings.client_id or f"heft-{station}"
        self._store = store
        self._bus = bus
        self._retry_initial_s = retry_initial_s
        self._retry_max_s = retry_max_s
        self._clock = clock
        self._state = StatePublisher(self.codec, station, settings.live_max_rate_hz, clock)
        self._commands = CommandResponder(settings, self.topics, handle_command, authority)
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

    def apply_event(self, event: Event) -> None:
        """Fold one bus event into what to publish (synchronous, never blocks)."""
        if isinstance(event, MeasurementCaptured):
            self.wake()
        else:
            self._state.apply_event(event)

    def active_alarms(self) -> ActiveAlarms:
        return self._state.active_alarms()

    async def reply_to(self, payload: bytes) -> Reply:
        """The reply to one raw command payload (validated, refused or handled)."""
        return await self._commands.reply_to(payload)

    async def run(self) -> None:
        """Keep the link up until cancelled; never returns otherwise."""
        if not self.settings.enabled:
            log.info("MQTT disabled in the config; the link stays idle")
            await asyncio.Event().wait()
        sub = self._bus.subscribe()
        consumer = asyncio.create_task(self._consume_events(sub), name="mqtt-events")
        try:
            try:
                self._state.restore_alarms(
                    await asyncio.to_thread(self._store.active_alarms, self.station)
                )
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
        """A fresh client per connection attempt, with the station's last will 'offline'."""
        will = self.codec.encode(StationStatus(station=self.station, online=False))
        return make_client(
            self.settings,
            self.client_id,
            will=aiomqtt.Will(will.topic, will.payload, qos=will.qos, retain=will.retain),
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
            # A session that stayed up was a good one: the backoff starts over after it.
            if started_at is None or self._clock() - started_at < STABLE_SESSION_S:
                raise aiomqtt.MqttError(f"link error: {err!r}") from err
        finally:
            self._connected.clear()
            self._state.connected = False

    async def _serve(self, client: aiomqtt.Client) -> None:
        t = self.topics
        await send(client, self.codec.encode(StationStatus(station=self.station, online=True)))
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
            await send(client, self.codec.encode_last(last[0]))
        self._state.mark_all_dirty()
        raise_if_cancel_requested()  # a cancel lost in a publish above must not start the session
        self._connected.set()
        self._state.connected = True
        try:
            await first_error(
                self._drain_outbox(client),
                self._publish_state(client),
                self._receive(client),
            )
        except asyncio.CancelledError:
            # Orderly shutdown: say so (the will only covers an abrupt loss).
            offline = self.codec.encode(StationStatus(station=self.station, online=False))
            with contextlib.suppress(Exception):
                async with asyncio.timeout(2):
                    await send(client, offline)
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
                await send(client, self.codec.encode(MeasurementCaptured(measurement=m)))
                # publish() returned: PUBACK arrived. Only now is the row done.
                self.published_measurements += 1
                try:
                    await asyncio.to_thread(self._store.mark_sent, outbox_id)
                except StorageError as err:  # it will be sent again: a duplicate, same id
                    log.error("cannot mark outbox row %d sent: %s", outbox_id, err)
            await send(client, self.codec.encode_last(rows[-1][1]))

    # ------------------------------------------------------------------ state from the bus

    async def _consume_events(self, sub: Subscription) -> None:
        async for event in sub:
            self.apply_event(event)

    async def _publish_state(self, client: aiomqtt.Client) -> None:
        await self._state.publish(client)

    # ------------------------------------------------------------------ commands

    async def _receive(self, client: aiomqtt.Client) -> None:
        ha_status = f"{self.settings.homeassistant_prefix}/status"
        async for msg in client.messages:
            if msg.topic.matches(self.topics.cmd):
                await self._commands.answer(client, msg)
            elif (
                self.settings.homeassistant_discovery
                and msg.topic.matches(ha_status)
                and raw_payload(msg.payload).decode("utf-8", "replace").strip() == "online"
            ):
                await self._publish_discovery(client)

    # ------------------------------------------------------------------ Home Assistant

    async def _publish_discovery(self, client: aiomqtt.Client) -> None:
        topic, payload = ha_discovery(self.topics, self.settings.homeassistant_prefix, __version__)
        await client.publish(topic, json.dumps(payload), qos=1, retain=True)
