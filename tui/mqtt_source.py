"""The dashboard attached to a running service through an MQTT broker (``heft dash``).

Subscribes to the station topics of :mod:`daemon.mqtt_topics` (one station, or ``+`` for all),
decodes each payload with the service's own wire codec (:mod:`daemon.wire`) into the same
event types the service puts on its bus, and sends
commands on the station's command topic, matching replies by request id. Read-only unless
``commands_enabled``. A bad payload is counted and skipped, never fatal.
"""

from __future__ import annotations

import asyncio
import contextlib
import json
import logging
import math
import re
import time
import uuid
from urllib.parse import unquote, urlsplit

import aiomqtt
from paho.mqtt.packettypes import PacketTypes
from paho.mqtt.properties import Properties
from pydantic import SecretStr, ValidationError
from tenacity import AsyncRetrying, RetryCallState, retry_if_exception_type, wait_exponential

from heft.daemon.command_api import Command, Reply
from heft.daemon.command_auth import Signer
from heft.daemon.events import Alarm, AlarmChanged, Event, station_of
from heft.daemon.mqtt_client import make_client, raise_if_cancel_requested
from heft.daemon.mqtt_settings import MqttSettings, TlsSettings
from heft.daemon.mqtt_topics import Topics, check_level
from heft.daemon.wire import ActiveAlarms, StationStatus, WireCodec, WireError
from heft.drivers.validation import problem_lines
from heft.tui.source import EventSource

log = logging.getLogger(__name__)

REPLY_TIMEOUT_S = 10.0
RETRY_MAX_WAIT_S = 5.0
_SCHEMES = {"mqtt": (1883, False), "tcp": (1883, False), "mqtts": (8883, True), "ssl": (8883, True)}


class BrokerUrlError(ValueError):
    """A --broker value that is not ``mqtt://[user[:password]@]host[:port][/topic-root]``."""


_URL_PASSWORD = re.compile(r"(//[^/@:]*:)[^/@]*@")


def shown_url(url: str) -> str:
    """``url`` as an error message may print it: a password in it becomes ``***``."""
    return _URL_PASSWORD.sub(r"\1***@", url)


def settings_from_url(url: str) -> MqttSettings:
    """MqttSettings from ``mqtt://host:port``; ``mqtts://`` turns on TLS; a path sets the root."""
    expected = "expected mqtt://[user[:password]@]host[:port][/topic-root], e.g. mqtt://127.0.0.1:1883"
    shown = shown_url(url)
    try:
        parts = urlsplit(url)
        port_given = parts.port
    except ValueError as err:
        raise BrokerUrlError(f"broker URL {shown!r}: {err}; {expected}") from None
    if parts.scheme not in _SCHEMES:
        raise BrokerUrlError(f"broker URL {shown!r}: unknown scheme {parts.scheme!r}; {expected}")
    if not parts.hostname:
        raise BrokerUrlError(f"broker URL {shown!r}: no host; {expected}")
    default_port, tls = _SCHEMES[parts.scheme]
    root = parts.path.strip("/") or "heft"
    try:
        return MqttSettings(
            enabled=True,
            host=parts.hostname,
            port=port_given or default_port,
            username=unquote(parts.username) if parts.username else None,
            password=SecretStr(unquote(parts.password)) if parts.password else None,
            tls=TlsSettings() if tls else None,
            topic_root=root,
        )
    except ValidationError as err:
        line = problem_lines(err, MqttSettings, first_only=True)[0]
        raise BrokerUrlError(f"broker URL {shown!r}: {line}") from None


class AlarmSnapshots:
    """Per-station active alarms, so the retained alarm list can be turned into changes."""

    def __init__(self) -> None:
        self._active: dict[str, dict[str, Alarm]] = {}

    def note(self, alarm: Alarm) -> None:
        active = self._active.setdefault(alarm.station, {})
        if alarm.active:
            active[alarm.key] = alarm
        else:
            active.pop(alarm.key, None)

    def changes(self, snap: ActiveAlarms) -> list[Event]:
        """The retained list of active alarms: raise what is new, clear what is gone."""
        now = self._active.get(snap.station, {})
        listed = {a.key: a for a in snap.active}
        events: list[Event] = []
        for key, old in list(now.items()):
            if key not in listed:
                cleared = old.model_copy(
                    update={"active": False, "message": "cleared", "time_utc": snap.time_utc}
                )
                self.note(cleared)
                events.append(AlarmChanged(alarm=cleared))
        for alarm in listed.values():
            if now.get(alarm.key) != alarm:
                self.note(alarm)
                events.append(AlarmChanged(alarm=alarm))
        return events


class MqttSource(EventSource):
    """Events from a broker; commands to the selected station's command topic.

    Args:
        broker: connection settings, or a URL ``mqtt://host:port`` (see
            :func:`settings_from_url`).
        station: only this station; None subscribes to every station under the root.
        commands_enabled: False (the default) makes the dashboard read-only.
        signer: signs each command with the operator's key (``heft dash --key-file``).
    """

    def __init__(
        self,
        broker: str | MqttSettings,
        station: str | None = None,
        commands_enabled: bool = False,
        *,
        reply_timeout_s: float = REPLY_TIMEOUT_S,
        signer: Signer | None = None,
    ) -> None:
        super().__init__()
        self.signer = signer
        self.settings = settings_from_url(broker) if isinstance(broker, str) else broker
        if station is not None:
            check_level(station, "station")
        self.station = station
        self.commands_enabled = commands_enabled
        self.reply_timeout_s = reply_timeout_s
        self.label = f"MQTT {self.settings.host}:{self.settings.port}"
        self.status_text = "connecting"
        self.bad_payloads = 0
        self.last_error = ""
        self._target: str | None = station
        self._codec = WireCodec(self.settings.topic_root)
        self._alarms = AlarmSnapshots()
        self.online: dict[str, bool] = {}
        self._client: aiomqtt.Client | None = None
        self._task: asyncio.Task[None] | None = None
        self._pending: dict[str, asyncio.Future[Reply]] = {}
        self.connected = asyncio.Event()

    async def start(self) -> None:
        self._task = asyncio.create_task(self._run(), name="dash-mqtt")

    async def stop(self) -> None:
        task, self._task = self._task, None
        if task is not None:
            task.cancel()
            with contextlib.suppress(asyncio.CancelledError):
                await task

    def select_station(self, station: str) -> None:
        self._target = station

    def _make_client(self) -> aiomqtt.Client:
        return make_client(self.settings, f"heft-dash-{uuid.uuid4().hex[:8]}")

    def _retrying(self, state: RetryCallState) -> None:
        err = state.outcome.exception() if state.outcome else None
        self.connected.clear()
        wait_s = state.next_action.sleep if state.next_action else 0.0
        self.retry_at_s = time.monotonic() + wait_s
        self.status_text = f"cannot reach {self.settings.host}:{self.settings.port}"
        log.info("%s (%s); retrying in %.1f s", self.status_text, err, wait_s)

    def connection_text(self, now_s: float) -> str:
        """connecting / connected / cannot reach host:port - retrying in N s."""
        if self.connected.is_set():
            return f"{self.label} connected"
        if self.retry_at_s is None:
            return f"{self.label} connecting"
        left_s = self.retry_at_s - now_s
        if left_s <= 0:
            return f"{self.status_text} - retrying now"
        return f"{self.status_text} - retrying in {math.ceil(left_s)} s"

    async def _run(self) -> None:
        while True:  # a session that ends cleanly (broker closed it) reconnects as well
            raise_if_cancel_requested()
            async for attempt in AsyncRetrying(
                retry=retry_if_exception_type(aiomqtt.MqttError),
                wait=wait_exponential(multiplier=0.5, max=RETRY_MAX_WAIT_S),
                before_sleep=self._retrying,
            ):
                with attempt:
                    await self._session()

    async def _session(self) -> None:
        topics = Topics(self.settings.topic_root, self.station or "+")
        async with self._make_client() as client:
            self._client = client
            try:
                for topic in (topics.status, topics.measurement, topics.measurement_last,
                              topics.capture, topics.device_all, topics.alarms,
                              topics.alarm_event, topics.cmd_reply):
                    await client.subscribe(topic, qos=1)
                await client.subscribe(topics.live_all, qos=0)
                # A stop() that landed as a SUBACK did is lost inside aiomqtt; honour it here.
                raise_if_cancel_requested()
                self.connected.set()
                self.status_text = "connected"
                self.retry_at_s = None
                async for message in client.messages:
                    self._on_message(message.topic.value, message.payload)
            finally:
                self._client = None
                self.connected.clear()

    def _on_message(self, topic: str, payload: object) -> None:
        data = payload if isinstance(payload, bytes) else str(payload).encode()
        try:
            message = self._codec.decode(topic, data)
        except WireError as err:
            self.bad_payloads += 1
            self.last_error = str(err).splitlines()[0]
            log.warning("ignored a bad payload: %s", err)
            return
        events: list[Event] = []
        reply: Reply | None = None
        if isinstance(message, StationStatus):
            self.online[message.station] = message.online
        elif isinstance(message, Reply):
            reply = message
        elif isinstance(message, ActiveAlarms):
            events = self._alarms.changes(message)
        elif message is not None:
            if isinstance(message, AlarmChanged):
                self._alarms.note(message.alarm)
            events = [message]
        if events:
            if self._target is None:
                self._target = station_of(events[0])
            self._deliver(events)
        if reply is not None and reply.request_id in self._pending:
            future = self._pending.pop(reply.request_id)
            if not future.done():
                future.set_result(reply)

    async def _send(self, cmd: Command) -> Reply:
        client, station = self._client, self._target
        if client is None:
            return Reply(ok=False, command=cmd.command, request_id=cmd.request_id,
                         message="not connected to the broker")
        if station is None:
            return Reply(ok=False, command=cmd.command, request_id=cmd.request_id,
                         message="no station heard from yet")
        request_id = cmd.request_id or uuid.uuid4().hex
        cmd = cmd.model_copy(update={"request_id": request_id})
        topics = Topics(self.settings.topic_root, station)
        props = Properties(PacketTypes.PUBLISH)  # type: ignore[no-untyped-call]  # paho is untyped
        props.ResponseTopic = topics.cmd_reply
        props.CorrelationData = request_id.encode()
        future: asyncio.Future[Reply] = asyncio.get_running_loop().create_future()
        self._pending[request_id] = future
        try:
            body = cmd.model_dump(mode="json", exclude_none=True)
            if self.signer is not None:  # state-changing commands need an operator's signature
                body = self.signer.sign(body)
            await client.publish(topics.cmd, json.dumps(body), qos=1, properties=props)
            return await asyncio.wait_for(future, self.reply_timeout_s)
        except TimeoutError:
            return Reply(ok=False, command=cmd.command, request_id=request_id,
                         message=f"no reply from {station} within {self.reply_timeout_s:g} s")
        finally:
            self._pending.pop(request_id, None)

