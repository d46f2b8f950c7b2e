"""The dashboard attached to a running service through an MQTT broker (``heft dash``).

Subscribes to the station topics of :mod:`daemon.mqtt_topics` (one station, or ``+`` for all),
turns each payload back into the same event types the service puts on its bus, and sends
commands on the station's command topic, matching replies by request id. Read-only unless
``commands_enabled``. A bad payload is counted and skipped, never fatal.
"""

from __future__ import annotations

import asyncio
import contextlib
import logging
import math
import time
import uuid
from urllib.parse import unquote, urlsplit

import aiomqtt
from paho.mqtt.packettypes import PacketTypes
from paho.mqtt.properties import Properties
from pydantic import SecretStr, ValidationError
from tenacity import AsyncRetrying, RetryCallState, retry_if_exception_type, wait_exponential

from heft.daemon.command_api import Command, Reply
from heft.daemon.events import (
    Alarm,
    AlarmChanged,
    CaptureStateChanged,
    DeviceStatus,
    Event,
    LiveReading,
    MeasurementCaptured,
)
from heft.daemon.measurement import Measurement
from heft.daemon.mqtt_link import raise_if_cancel_requested
from heft.daemon.mqtt_settings import MqttSettings, TlsSettings
from heft.daemon.mqtt_topics import (
    ALARM_EVENT,
    ALARMS,
    CAPTURE,
    CMD_REPLY,
    DEVICE,
    LIVE,
    MEASUREMENT,
    MEASUREMENT_LAST,
    STATUS,
    AlarmPayload,
    AlarmsPayload,
    CaptureStatePayload,
    DeviceStatusPayload,
    LiveReadingPayload,
    Topics,
    check_level,
    parse_topic,
)
from heft.drivers.reading import Flag
from heft.tui.source import EventSource
from heft.tui.state import station_of

log = logging.getLogger(__name__)

REPLY_TIMEOUT_S = 10.0
RETRY_MAX_WAIT_S = 5.0
_SCHEMES = {"mqtt": (1883, False), "tcp": (1883, False), "mqtts": (8883, True), "ssl": (8883, True)}


class BrokerUrlError(ValueError):
    """A --broker value that is not ``mqtt://[user[:password]@]host[:port][/topic-root]``."""


def settings_from_url(url: str) -> MqttSettings:
    """MqttSettings from ``mqtt://host:port``; ``mqtts://`` turns on TLS; a path sets the root."""
    expected = "expected mqtt://[user[:password]@]host[:port][/topic-root], e.g. mqtt://127.0.0.1:1883"
    try:
        parts = urlsplit(url)
        port_given = parts.port
    except ValueError as err:
        raise BrokerUrlError(f"broker URL {url!r}: {err}; {expected}") from None
    if parts.scheme not in _SCHEMES:
        raise BrokerUrlError(f"broker URL {url!r}: unknown scheme {parts.scheme!r}; {expected}")
    if not parts.hostname:
        raise BrokerUrlError(f"broker URL {url!r}: no host; {expected}")
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
        first = err.errors()[0]
        where = ".".join(str(p) for p in first["loc"])
        raise BrokerUrlError(f"broker URL {url!r}: {where}: {first['msg']}") from None


def flags_from_names(names: list[str]) -> Flag:
    """['stable', 'net'] -> Flag.STABLE | Flag.NET; unknown names are ignored."""
    flags = Flag.NONE
    for name in names:
        member = Flag.__members__.get(name.upper())
        if member is not None:
            flags |= member
    return flags


class PayloadConverter:
    """Turns (topic, payload) into events; keeps the per-station active-alarm snapshot."""

    def __init__(self, root: str) -> None:
        self.root = root
        self._active: dict[str, dict[str, Alarm]] = {}
        self.online: dict[str, bool] = {}

    def convert(self, topic: str, payload: bytes) -> tuple[list[Event], Reply | None]:
        """Events for one message, plus a command reply when it was one.

        Raises ValidationError / ValueError on a malformed payload (the caller counts it).
        """
        match = parse_topic(self.root, topic)
        if match is None:
            return [], None
        kind, station = match.kind, match.station
        if kind == STATUS:
            self.online[station] = payload.decode("utf-8", "replace").strip() == "online"
            return [], None
        if kind in (MEASUREMENT, MEASUREMENT_LAST):
            return [MeasurementCaptured(Measurement.model_validate_json(payload))], None
        if kind == LIVE:
            live = LiveReadingPayload.model_validate_json(payload)
            return [LiveReading(live.station, live.channel, live.t_mono_s, live.value_g,
                                flags_from_names(live.flags))], None
        if kind == CAPTURE:
            cap = CaptureStatePayload.model_validate_json(payload)
            return [CaptureStateChanged(cap.station, cap.state, time.monotonic(), cap.detail)], None
        if kind == DEVICE:
            d = DeviceStatusPayload.model_validate_json(payload)
            return [DeviceStatus(d.station, d.device, d.connected, d.port, d.sample_rate_hz,
                                 d.frame_errors, d.last_value, None, d.model, d.firmware)], None
        if kind == ALARM_EVENT:
            alarm = AlarmPayload.model_validate_json(payload).to_alarm()
            self._note(alarm)
            return [AlarmChanged(alarm)], None
        if kind == ALARMS:
            return self._snapshot(AlarmsPayload.model_validate_json(payload)), None
        if kind == CMD_REPLY:
            return [], Reply.model_validate_json(payload)
        return [], None

    def _note(self, alarm: Alarm) -> None:
        active = self._active.setdefault(alarm.station, {})
        if alarm.active:
            active[alarm.key] = alarm
        else:
            active.pop(alarm.key, None)

    def _snapshot(self, snap: AlarmsPayload) -> list[Event]:
        """The retained list of active alarms: raise what is new, clear what is gone."""
        now = self._active.get(snap.station, {})
        listed = {a.key: a.to_alarm() for a in snap.active}
        events: list[Event] = []
        for key, old in list(now.items()):
            if key not in listed:
                cleared = Alarm(old.station, old.kind, old.source, False,
                                "cleared", snap.time_utc, old.acknowledged)
                self._note(cleared)
                events.append(AlarmChanged(cleared))
        for alarm in listed.values():
            if now.get(alarm.key) != alarm:
                self._note(alarm)
                events.append(AlarmChanged(alarm))
        return events


class MqttSource(EventSource):
    """Events from a broker; commands to the selected station's command topic.

    Args:
        url: ``mqtt://host:port`` (see :func:`settings_from_url`).
        station: only this station; None subscribes to every station under the root.
        commands_enabled: False (the default) makes the dashboard read-only.
    """

    def __init__(
        self,
        url: str,
        station: str | None = None,
        commands_enabled: bool = False,
        *,
        reply_timeout_s: float = REPLY_TIMEOUT_S,
    ) -> None:
        super().__init__()
        self.settings = settings_from_url(url)
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
        self._converter = PayloadConverter(self.settings.topic_root)
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
        s = self.settings
        return aiomqtt.Client(
            s.host,
            s.port,
            username=s.username,
            password=s.password.get_secret_value() if s.password else None,
            identifier=f"heft-dash-{uuid.uuid4().hex[:8]}",
            protocol=aiomqtt.ProtocolVersion.V5,
            tls_params=aiomqtt.TLSParameters() if s.tls is not None else None,
            keepalive=s.keepalive_s,
        )

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
            events, reply = self._converter.convert(topic, data)
        except (ValidationError, ValueError) as err:
            self.bad_payloads += 1
            self.last_error = f"{topic}: {err}".splitlines()[0]
            log.warning("ignored a bad payload on %s: %s", topic, err)
            return
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
            await client.publish(topics.cmd, cmd.model_dump_json(exclude_none=True), qos=1,
                                 properties=props)
            return await asyncio.wait_for(future, self.reply_timeout_s)
        except TimeoutError:
            return Reply(ok=False, command=cmd.command, request_id=request_id,
                         message=f"no reply from {station} within {self.reply_timeout_s:g} s")
        finally:
            self._pending.pop(request_id, None)

