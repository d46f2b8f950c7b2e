"""The MQTT wire codec: every heft message to (topic, payload) and back, in one place.

The station's link publishes through :meth:`WireCodec.encode`; the dashboard, and any later
consumer such as a plant-wide collector, reads through :meth:`WireCodec.decode`. Payload shapes
are the events themselves (``heft.daemon.events``) plus the time the station published them;
the JSON Schemas in ``docs/mqtt.md`` come from :data:`PAYLOAD_MODELS` (``heft schema``). QoS and
retain flags come from ``TOPIC_SPECS``, so a topic's delivery is stated once.

A station id enters through the message (every event names its station); the topic root enters
through the codec (``WireCodec(root)``), as it is a broker-side choice of the deployment.
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import UTC, datetime
from typing import Final, TypeAlias, TypeVar

from pydantic import BaseModel, ConfigDict, Field, ValidationError

from heft.daemon.command_api import Reply
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
from heft.daemon.mqtt_topics import (
    ALARM_EVENT,
    ALARMS,
    CAPTURE,
    CMD_REPLY,
    DEVICE,
    LIVE,
    MEASUREMENT,
    MEASUREMENT_LAST,
    OFFLINE,
    ONLINE,
    STATUS,
    TOPIC_SPECS,
    Topics,
    parse_topic,
)

# --------------------------------------------------------------------------------------------
# Wire shapes: an event as published. ``extra="ignore"``: a consumer keeps reading a newer
# station that added a field.

_PUBLISHED = Field(description="when the station published it (UTC)")


class LiveReadingPayload(LiveReading):
    """One live reading of one channel (throttled, QoS 0; a missed one is simply superseded)."""

    model_config = ConfigDict(extra="ignore")
    time_utc: datetime = _PUBLISHED


class CaptureStatePayload(CaptureStateChanged):
    """The capture engine's state (retained: a new subscriber sees the current state)."""

    model_config = ConfigDict(extra="ignore")
    time_utc: datetime = _PUBLISHED


class DeviceStatusPayload(DeviceStatus):
    """One device's connection and health (retained per device)."""

    model_config = ConfigDict(extra="ignore")
    time_utc: datetime = _PUBLISHED


class AlarmPayload(Alarm):
    """One alarm, raised or cleared."""

    model_config = ConfigDict(extra="ignore")


class AlarmsPayload(BaseModel):
    """Every alarm active at the station now (retained; an empty list means all clear)."""

    model_config = ConfigDict(frozen=True, extra="ignore")
    station: str = Field(min_length=1)
    time_utc: datetime
    active: list[AlarmPayload] = Field(default_factory=list)


# --------------------------------------------------------------------------------------------
# Messages that are not bus events: the retained alarm list and the station's availability.


@dataclass(frozen=True, slots=True, kw_only=True)
class ActiveAlarms:
    """The retained list of a station's active alarms (the ``alarms`` topic)."""

    station: str
    time_utc: datetime
    active: tuple[Alarm, ...] = ()


@dataclass(frozen=True, slots=True, kw_only=True)
class StationStatus:
    """The ``status`` topic: 'online', or 'offline' (the last will, or an orderly stop)."""

    station: str
    online: bool


# What a station publishes through the codec, and what a consumer decodes (replies included:
# a reply goes to the topic the command asked for, so the command handler publishes it itself).
Outbound: TypeAlias = Event | ActiveAlarms | StationStatus
Message: TypeAlias = Outbound | Reply

# Payload name (``TopicSpec.payload``) -> the model whose JSON Schema documents it.
PAYLOAD_MODELS: Final[dict[str, type[BaseModel]]] = {
    "measurement": Measurement,
    "live_reading": LiveReadingPayload,
    "capture_state": CaptureStatePayload,
    "device_status": DeviceStatusPayload,
    "alarms": AlarmsPayload,
    "alarm": AlarmPayload,
    "reply": Reply,
}

_DELIVERY: Final = {spec.leaf.split("/<")[0]: (spec.qos, spec.retain) for spec in TOPIC_SPECS}


class WireError(ValueError):
    """A payload that is not what its topic carries; the message names the topic and field."""


@dataclass(frozen=True, slots=True)
class Outgoing:
    """One MQTT publish: where, what, and how it is delivered."""

    topic: str
    payload: bytes
    qos: int
    retain: bool


E = TypeVar("E", bound=BaseModel)


def _event(cls: type[E], wire: BaseModel) -> E:
    """The bus event inside a wire shape (the wire's own extras, e.g. time_utc, dropped)."""
    return cls.model_validate({name: getattr(wire, name) for name in cls.model_fields})


class WireCodec:
    """Encode and decode heft's MQTT messages under one topic root (``mqtt.topic_root``)."""

    def __init__(self, root: str) -> None:
        Topics(root, "+")  # checks the root
        self.root = root

    # ------------------------------------------------------------------ encode

    def encode(self, message: Outbound, *, now_utc: datetime | None = None) -> Outgoing:
        """The publish for one message; ``now_utc`` stamps events that carry no time of their own.

        Raises TopicError when a name in the message cannot be a topic level.
        """
        now = now_utc or datetime.now(UTC)
        if isinstance(message, MeasurementCaptured):
            m = message.measurement
            return self._out(MEASUREMENT, Topics(self.root, m.station).measurement, m)
        if isinstance(message, LiveReading):
            t = Topics(self.root, message.station)
            return self._out(LIVE, t.live(message.channel), _wire(LiveReadingPayload, message, now))
        if isinstance(message, CaptureStateChanged):
            t = Topics(self.root, message.station)
            return self._out(CAPTURE, t.capture, _wire(CaptureStatePayload, message, now))
        if isinstance(message, DeviceStatus):
            topic = Topics(self.root, message.station).device(message.device)
            return self._out(DEVICE, topic, _wire(DeviceStatusPayload, message, now))
        if isinstance(message, AlarmChanged):
            alarm = message.alarm
            return self._out(ALARM_EVENT, Topics(self.root, alarm.station).alarm_event, alarm)
        if isinstance(message, ActiveAlarms):
            wire = AlarmsPayload(
                station=message.station,
                time_utc=message.time_utc,
                active=[AlarmPayload.model_validate(dict(a)) for a in message.active],
            )
            return self._out(ALARMS, Topics(self.root, message.station).alarms, wire)
        if isinstance(message, StationStatus):
            topic = Topics(self.root, message.station).status
            qos, retain = _DELIVERY[STATUS]
            return Outgoing(topic, (ONLINE if message.online else OFFLINE).encode(), qos, retain)
        raise TypeError(f"not a message a station publishes: {type(message).__name__}")

    def encode_last(self, measurement: Measurement) -> Outgoing:
        """The retained ``last_measurement`` copy of a measurement."""
        topic = Topics(self.root, measurement.station).measurement_last
        return self._out(MEASUREMENT_LAST, topic, measurement)

    @staticmethod
    def _out(leaf: str, topic: str, model: BaseModel) -> Outgoing:
        qos, retain = _DELIVERY[leaf]
        return Outgoing(topic, model.model_dump_json().encode(), qos, retain)

    # ------------------------------------------------------------------ decode

    def decode(self, topic: str, payload: bytes) -> Message | None:
        """The message a received payload carries; None for a topic that is none of heft's.

        Raises WireError naming the topic and the first bad field.
        """
        match = parse_topic(self.root, topic)
        if match is None:
            return None
        kind = match.kind
        try:
            if kind == STATUS:
                return StationStatus(
                    station=match.station, online=_text(payload).strip() == ONLINE
                )
            if kind in (MEASUREMENT, MEASUREMENT_LAST):
                return MeasurementCaptured(measurement=Measurement.model_validate_json(payload))
            if kind == LIVE:
                return _event(LiveReading, LiveReadingPayload.model_validate_json(payload))
            if kind == CAPTURE:
                return _event(CaptureStateChanged, CaptureStatePayload.model_validate_json(payload))
            if kind == DEVICE:
                return _event(DeviceStatus, DeviceStatusPayload.model_validate_json(payload))
            if kind == ALARM_EVENT:
                alarm = _event(Alarm, AlarmPayload.model_validate_json(payload))
                return AlarmChanged(alarm=alarm)
            if kind == ALARMS:
                snap = AlarmsPayload.model_validate_json(payload)
                return ActiveAlarms(
                    station=snap.station,
                    time_utc=snap.time_utc,
                    active=tuple(_event(Alarm, a) for a in snap.active),
                )
            if kind == CMD_REPLY:
                return Reply.model_validate_json(payload)
        except ValidationError as err:
            raise WireError(f"{topic}: {_first_error(err)}") from None
        return None  # the command topic: the station's input, not a message it sends


def _wire(cls: type[E], event: BaseModel, now_utc: datetime) -> E:
    return cls.model_validate({**dict(event), "time_utc": now_utc})


def _text(payload: bytes) -> str:
    return payload.decode("utf-8", errors="replace")


def _first_error(err: ValidationError) -> str:
    """'<field>: <what was wrong>' for the first error (and how many more there were)."""
    errors = err.errors(include_url=False)
    first = errors[0]
    where = ".".join(str(p) for p in first["loc"]) or "payload"
    more = f" (and {len(errors) - 1} more)" if len(errors) > 1 else ""
    return f"{where}: {first['msg']}{more}"

