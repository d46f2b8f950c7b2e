"""MQTT topic names and payload models: the contract between the service and every MQTT client.

Everything a station publishes lives under one subtree, ``<root>/<station>/``, so a clustered
broker can place a station's traffic by prefix and a consumer can subscribe to one station or,
with ``+`` in the station level, to all of them. ``docs/mqtt.md`` documents each topic; its JSON
Schemas are generated from the models below (``heft schema``), never written by hand.

Topics (``S`` = ``<root>/<station>``):

====================================  ====  ======  =========================================
topic                                 QoS   retain  payload
====================================  ====  ======  =========================================
S/status                              1     yes     ``online`` / ``offline`` (last will)
S/measurement                         1     no      :class:`~daemon.measurement.Measurement`
S/last_measurement                    1     yes     :class:`~daemon.measurement.Measurement`
S/live/<device>/<index>               0     no      :class:`LiveReadingPayload`
S/capture                             1     yes     :class:`CaptureStatePayload`
S/device/<device>                     1     yes     :class:`DeviceStatusPayload`
S/alarms                              1     yes     :class:`AlarmsPayload` (all active alarms)
S/alarm/event                         1     no      :class:`AlarmPayload` (each change)
S/cmd                                 1     no      a command (``daemon.command_api``)
S/cmd/reply                           1     no      :class:`~daemon.command_api.Reply`
====================================  ====  ======  =========================================
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import datetime
from typing import Final, Literal

from pydantic import BaseModel, ConfigDict, Field

from heft.daemon.events import (
    Alarm,
    AlarmKind,
    CaptureState,
    CaptureStateChanged,
    DeviceStatus,
    LiveReading,
)
from heft.drivers.reading import Flag

ONLINE: Final = "online"
OFFLINE: Final = "offline"
Availability = Literal["online", "offline"]

# Names of the leaf topics below a station's subtree (also used by ``parse_topic``).
STATUS: Final = "status"
MEASUREMENT: Final = "measurement"
MEASUREMENT_LAST: Final = "last_measurement"
LIVE: Final = "live"
CAPTURE: Final = "capture"
DEVICE: Final = "device"
ALARMS: Final = "alarms"
ALARM_EVENT: Final = "alarm/event"
CMD: Final = "cmd"
CMD_REPLY: Final = "cmd/reply"


class TopicError(ValueError):
    """A name that cannot be used as a topic level (empty, or holding '/', '+', '#' or NUL)."""


def check_level(name: str, what: str) -> str:
    """Return ``name`` if it is usable as one topic level, else raise naming ``what``."""
    if not name or any(c in name for c in "/+#\x00"):
        raise TopicError(
            f"{what} {name!r} cannot be an MQTT topic level: it must be non-empty and "
            "contain no '/', '+', '#' or NUL"
        )
    return name


def _check_root(root: str) -> str:
    levels = root.split("/")
    for level in levels:
        check_level(level, "topic_root level")
    return root


def _channel_levels(channel: str) -> str:
    """'<device>/<index>' -> the same two levels, each checked."""
    parts = channel.split("/")
    if len(parts) != 2:
        raise TopicError(f"channel {channel!r}: expected '<device>/<index>'")
    return "/".join(check_level(p, "channel part") for p in parts)


@dataclass(frozen=True, slots=True)
class Topics:
    """Topic builder for one station (``station='+'`` builds subscription filters for all)."""

    root: str
    station: str

    def __post_init__(self) -> None:
        _check_root(self.root)
        if self.station != "+":
            check_level(self.station, "station")

    @classmethod
    def all_stations(cls, root: str) -> Topics:
        """Filters matching every station under ``root`` (e.g. ``heft/+/measurement``)."""
        return cls(root, "+")

    @property
    def base(self) -> str:
        return f"{self.root}/{self.station}"

    @property
    def subtree(self) -> str:
        """Filter for everything the station publishes and receives."""
        return f"{self.base}/#"

    @property
    def status(self) -> str:
        return f"{self.base}/{STATUS}"

    @property
    def measurement(self) -> str:
        return f"{self.base}/{MEASUREMENT}"

    @property
    def measurement_last(self) -> str:
        return f"{self.base}/{MEASUREMENT_LAST}"

    def live(self, channel: str) -> str:
        """Topic of one channel's live readings; ``channel`` is '<device>/<index>'."""
        return f"{self.base}/{LIVE}/{_channel_levels(channel)}"

    @property
    def live_all(self) -> str:
        return f"{self.base}/{LIVE}/#"

    @property
    def capture(self) -> str:
        return f"{self.base}/{CAPTURE}"

    def device(self, device: str) -> str:
        return f"{self.base}/{DEVICE}/{check_level(device, 'device')}"

    @property
    def device_all(self) -> str:
        return f"{self.base}/{DEVICE}/+"

    @property
    def alarms(self) -> str:
        return f"{self.base}/{ALARMS}"

    @property
    def alarm_event(self) -> str:
        return f"{self.base}/{ALARM_EVENT}"

    @property
    def cmd(self) -> str:
        return f"{self.base}/{CMD}"

    @property
    def cmd_reply(self) -> str:
        return f"{self.base}/{CMD_REPLY}"


@dataclass(frozen=True, slots=True)
class TopicSpec:
    """One row of the topic reference (``docs/mqtt.md`` is generated from ``TOPIC_SPECS``)."""

    leaf: str  # below '<root>/<station>/'
    qos: int
    retain: bool
    direction: Literal["out", "in"]  # out: the station publishes; in: the station subscribes
    payload: str  # a key of ``heft.tui.commands.schema.PAYLOADS``
    summary: str


TOPIC_SPECS: Final[tuple[TopicSpec, ...]] = (
    TopicSpec(
        STATUS,
        1,
        True,
        "out",
        "availability",
        "'online' while connected; the broker publishes the last will 'offline' when the "
        "station vanishes, and the station publishes 'offline' itself on an orderly stop",
    ),
    TopicSpec(
        MEASUREMENT,
        1,
        False,
        "out",
        "measurement",
        "every captured club, from the durable outbox; may repeat after a reconnect, always "
        "under the same id: drop duplicates by id",
    ),
    TopicSpec(
        MEASUREMENT_LAST,
        1,
        True,
        "out",
        "measurement",
        "the newest measurement, for dashboards and Home Assistant",
    ),
    TopicSpec(
        f"{LIVE}/<device>/<index>",
        0,
        False,
        "out",
        "live_reading",
        "newest reading of one channel, at most mqtt.live_max_rate_hz per channel",
    ),
    TopicSpec(CAPTURE, 1, True, "out", "capture_state", "the capture engine's state"),
    TopicSpec(f"{DEVICE}/<device>", 1, True, "out", "device_status", "one device's health"),
    TopicSpec(
        ALARMS,
        1,
        True,
        "out",
        "alarms",
        "every alarm active now (empty list: all clear), re-published on each change",
    ),
    TopicSpec(ALARM_EVENT, 1, False, "out", "alarm", "each raise, clear or acknowledgement"),
    TopicSpec(CMD, 1, False, "in", "command", "commands to the station (see 'Commands')"),
    TopicSpec(
        CMD_REPLY,
        1,
        False,
        "out",
        "reply",
        "replies to commands that came without an MQTT 5 response topic",
    ),
)


@dataclass(frozen=True, slots=True)
class TopicMatch:
    """What ``parse_topic`` found: the station, the leaf kind and any trailing levels."""

    station: str
    kind: str  # one of the leaf names above, e.g. "last_measurement" or "live"
    rest: str = ""  # "<device>/<index>" for live, "<device>" for device, else ""


_FIXED_LEAVES: Final = (
    STATUS,
    MEASUREMENT,
    MEASUREMENT_LAST,
    CAPTURE,
    ALARMS,
    ALARM_EVENT,
    CMD,
    CMD_REPLY,
)


def parse_topic(root: str, topic: str) -> TopicMatch | None:
    """Classify a received topic; None when it is not one of heft's topics under ``root``."""
    prefix = root + "/"
    if not topic.startswith(prefix):
        return None
    station, _, leaf = topic[len(prefix) :].partition("/")
    if not station or not leaf:
        return None
    if leaf in _FIXED_LEAVES:
        return TopicMatch(station, leaf)
    head, _, rest = leaf.partition("/")
    if head == LIVE and rest.count("/") == 1:
        return TopicMatch(station, LIVE, rest)
    if head == DEVICE and rest and "/" not in rest:
        return TopicMatch(station, DEVICE, rest)
    return None


# --------------------------------------------------------------------------------------------
# Payload models. Measurements go out as ``daemon.measurement.Measurement`` unchanged.


class _Payload(BaseModel):
    model_config = ConfigDict(frozen=True, extra="ignore")


def flag_names(flags: Flag) -> list[str]:
    """Flag set -> sorted lower-case names, e.g. ['net', 'stable'] (empty for NONE)."""
    return sorted((f.name or "").lower() for f in Flag if f.value and f in flags)


class LiveReadingPayload(_Payload):
    """One live reading of one channel (throttled, QoS 0; a missed one is simply superseded)."""

    station: str
    channel: str = Field(description="'<device>/<channel index>'")
    value_g: float
    flags: list[str] = Field(default_factory=list, description="lower-case Flag names")
    t_mono_s: float = Field(description="the service's monotonic clock: for intervals only")
    time_utc: datetime

    @classmethod
    def from_event(cls, ev: LiveReading, now_utc: datetime) -> LiveReadingPayload:
        return cls(
            station=ev.station,
            channel=ev.channel,
            value_g=ev.value_g,
            flags=flag_names(ev.flags),
            t_mono_s=ev.t_mono_s,
            time_utc=now_utc,
        )


class CaptureStatePayload(_Payload):
    """The capture engine's state (retained: a new subscriber sees the current state)."""

    station: str
    state: CaptureState
    detail: str = ""
    time_utc: datetime

    @classmethod
    def from_event(cls, ev: CaptureStateChanged, now_utc: datetime) -> CaptureStatePayload:
        return cls(station=ev.station, state=ev.state, detail=ev.detail, time_utc=now_utc)


class DeviceStatusPayload(_Payload):
    """One device's connection and health (retained per device)."""

    station: str
    device: str
    connected: bool
    port: str
    sample_rate_hz: float | None = None
    frame_errors: int = 0
    last_value: float | None = None
    model: str = ""
    firmware: str = ""
    time_utc: datetime

    @classmethod
    def from_event(cls, ev: DeviceStatus, now_utc: datetime) -> DeviceStatusPayload:
        return cls(
            station=ev.station,
            device=ev.device,
            connected=ev.connected,
            port=ev.port,
            sample_rate_hz=ev.sample_rate_hz,
            frame_errors=ev.frame_errors,
            last_value=ev.last_value,
            model=ev.model,
            firmware=ev.firmware,
            time_utc=now_utc,
        )


class AlarmPayload(_Payload):
    """One alarm, raised or cleared."""

    station: str
    key: str = Field(description="'<kind>:<source>', the id used by the ack_alarm command")
    kind: AlarmKind
    source: str = Field(description="device name, channel or 'station'")
    active: bool
    acknowledged: bool = False
    message: str
    time_utc: datetime

    @classmethod
    def from_alarm(cls, alarm: Alarm) -> AlarmPayload:
        return cls(
            station=alarm.station,
            key=alarm.key,
            kind=alarm.kind,
            source=alarm.source,
            active=alarm.active,
            acknowledged=alarm.acknowledged,
            message=alarm.message,
            time_utc=alarm.time_utc,
        )

    def to_alarm(self) -> Alarm:
        return Alarm(
            station=self.station,
            kind=self.kind,
            source=self.source,
            active=self.active,
            message=self.message,
            time_utc=self.time_utc,
            acknowledged=self.acknowledged,
        )


class AlarmsPayload(_Payload):
    """Every alarm active at the station now (retained; an empty list means all clear)."""

    station: str
    time_utc: datetime
    active: list[AlarmPayload] = Field(default_factory=list)


# --------------------------------------------------------------------------------------------
# Home Assistant MQTT discovery (device-based: one config message describes the whole station).


def ha_object_id(station: str) -> str:
    """Station id as a discovery object id (letters, digits, '_' and '-' only)."""
    return "heft_" + "".join(c if c.isalnum() or c in "_-" else "_" for c in station)


def ha_discovery(
    topics: Topics, ha_prefix: str, software_version: str
) -> tuple[str, dict[str, object]]:
    """Topic and payload announcing the station as one Home Assistant device.

    The entities read the retained ``last_measurement``, ``capture`` and ``alarms`` topics, and
    the station's ``status`` topic is their availability.
    """
    oid = ha_object_id(topics.station)

    def sensor(
        key: str, name: str, topic: str, template: str, **extra: object
    ) -> dict[str, object]:
        return {
            "p": "sensor",
            "name": name,
            "unique_id": f"{oid}_{key}",
            "state_topic": topic,
            "value_template": template,
            **extra,
        }

    last = topics.measurement_last
    components: dict[str, object] = {
        "total_weight": sensor(
            "total_weight",
            "Total weight",
            last,
            "{{ value_json.total_weight_g }}",
            unit_of_measurement="g",
            device_class="weight",
            state_class="measurement",
        ),
        "balance_point": sensor(
            "balance_point",
            "Balance point",
            last,
            "{{ value_json.balance_point_in }}",
            unit_of_measurement="in",
            device_class="distance",
            state_class="measurement",
        ),
        "swingweight": sensor("swingweight", "Swing weight", last, "{{ value_json.swingweight }}"),
        "swingweight_points": sensor(
            "swingweight_points",
            "Swing weight points",
            last,
            "{{ value_json.swingweight_points }}",
            state_class="measurement",
        ),
        "verdict": sensor("verdict", "Verdict", last, "{{ value_json.verdict }}"),
        "club_id": sensor("club_id", "Club id", last, "{{ value_json.club_id }}"),
        "capture_state": sensor(
            "capture_state", "Capture state", topics.capture, "{{ value_json.state }}"
        ),
        "alarm": {
            "p": "binary_sensor",
            "name": "Alarm",
            "unique_id": f"{oid}_alarm",
            "device_class": "problem",
            "state_topic": topics.alarms,
            "value_template": "{{ 'ON' if value_json.active | length > 0 else 'OFF' }}",
        },
    }
    payload: dict[str, object] = {
        "dev": {
            "ids": [oid],
            "name": f"heft {topics.station}",
            "mf": "heft",
            "mdl": "club weighing station",
            "sw": software_version,
        },
        "o": {"name": "heft", "sw": software_version},
        "availability": [
            {"topic": topics.status, "payload_available": ONLINE, "payload_not_available": OFFLINE}
        ],
        "qos": 1,
        "cmps": components,
    }
    return f"{ha_prefix}/device/{oid}/config", payload
