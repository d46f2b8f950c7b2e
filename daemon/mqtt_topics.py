"""MQTT topic names: the contract between the service and every MQTT client.

Everything a station publishes lives under one subtree, ``<root>/<station>/``, so a clustered
broker can place a station's traffic by prefix and a consumer can subscribe to one station or,
with ``+`` in the station level, to all of them. ``docs/mqtt.md`` documents each topic; its JSON
Schemas are generated from the payload models of ``heft.daemon.wire`` (``heft schema``), never
written by hand; the codec there turns messages into payloads and back.

Topics (``S`` = ``<root>/<station>``):

====================================  ====  ======  =========================================
topic                                 QoS   retain  payload
====================================  ====  ======  =========================================
S/status                              1     yes     ``online`` / ``offline`` (last will)
S/measurement                         1     no      :class:`~daemon.measurement.Measurement`
S/last_measurement                    1     yes     :class:`~daemon.measurement.Measurement`
S/live/<device>/<index>               0     no      :class:`~daemon.events.LiveReading`
S/capture                             1     yes     :class:`~daemon.events.CaptureStateChanged`
S/device/<device>                     1     yes     :class:`~daemon.events.DeviceStatus`
S/alarms                              1     yes     :class:`~daemon.wire.ActiveAlarms`
S/alarm/event                         1     no      :class:`~daemon.events.Alarm` (each change)
S/cmd                                 1     no      a command (``daemon.command_api``)
S/cmd/reply                           1     no      :class:`~daemon.command_api.Reply`
====================================  ====  ======  =========================================
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Final, Literal

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
