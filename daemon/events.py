"""Events the service emits, and the in-process bus that fans them out.

The dashboard, the MQTT publisher and tests are all subscribers; none of them owns hardware.
A slow subscriber loses its oldest events rather than slowing capture (its queue is bounded);
measurements are durable in the database anyway, so a subscriber can always catch up from there.

Events are frozen pydantic models, built with keyword arguments only and validated on
construction: a bad field raises ``ValidationError`` naming it where the event is made, not
where a subscriber trips over it. Their JSON form is the MQTT wire format (``heft.daemon.wire``
adds only the publish time), so a field added here reaches the wire and its schema at once.
Field order is the wire's key order.
"""

from __future__ import annotations

import asyncio
import enum
from collections.abc import AsyncIterator
from dataclasses import dataclass, field
from datetime import datetime
from typing import Annotated, Any

from pydantic import (
    BaseModel,
    BeforeValidator,
    ConfigDict,
    Field,
    PlainSerializer,
    computed_field,
    model_validator,
)

from heft.daemon.measurement import Measurement
from heft.drivers.reading import Flag


class CaptureState(enum.StrEnum):
    EMPTY = "empty"  # nothing on the supports, armed
    SETTLING = "settling"  # load detected, waiting for every channel to settle
    CAPTURED = "captured"  # stable window taken; a measurement was produced
    HOLDING = "holding"  # club still on the supports after capture (no second capture)
    UNSETTLED = "unsettled"  # load present but will not settle within the time limit
    OFFLINE = "offline"  # a device of the geometry is not connected


class AlarmKind(enum.StrEnum):
    OUT_OF_SPEC = "out_of_spec"
    DEVICE_OFFLINE = "device_offline"
    OVERLOAD = "overload"
    WILL_NOT_SETTLE = "will_not_settle"
    ZERO_OUT_OF_RANGE = "zero_out_of_range"
    NEEDS_ZERO = "needs_zero"  # empty and stable but off zero by more than tracking may follow
    CALIBRATION_DUE = "calibration_due"
    CALIBRATION_OVERDUE = "calibration_overdue"
    STORAGE_FAILED = "storage_failed"


def flag_names(flags: Flag) -> list[str]:
    """Flag set -> sorted lower-case names, e.g. ['net', 'stable'] (empty for NONE)."""
    return sorted((f.name or "").lower() for f in Flag if f.value and f in flags)


def _flags_in(value: Any) -> Any:
    """A list of lower-case Flag names (the wire form) -> Flag; anything else passes through."""
    if not isinstance(value, list | tuple):
        return value
    flags = Flag.NONE
    for name in value:
        member = Flag.__members__.get(str(name).upper()) if name else None
        if member is None:
            known = ", ".join(sorted(n.lower() for n in Flag.__members__ if n != "NONE"))
            raise ValueError(f"unknown flag {name!r}; expected some of: {known}")
        flags |= member
    return flags


# In memory a Flag set; on the wire a sorted list of lower-case names.
Flags = Annotated[
    Flag,
    BeforeValidator(_flags_in),
    PlainSerializer(flag_names, return_type=list[str], when_used="json"),
    Field(description="lower-case Flag names"),
]
Name = Annotated[str, Field(min_length=1)]


class _Event(BaseModel):
    model_config = ConfigDict(frozen=True, extra="forbid")


class LiveReading(_Event):
    """One live reading of one channel (throttled on MQTT, QoS 0: a missed one is superseded)."""

    station: Name
    channel: str = Field(pattern=r"^[^/]+/[^/]+$", description="'<device>/<channel index>'")
    value_g: float
    flags: Flags = Flag.NONE
    t_mono_s: float = Field(description="the service's monotonic clock: for intervals only")


class CaptureStateChanged(_Event):
    """The capture engine's state (retained on MQTT: a new subscriber sees the current state)."""

    station: Name
    state: CaptureState
    detail: str = ""
    t_mono_s: float = Field(description="the service's monotonic clock: for intervals only")


class MeasurementCaptured(_Event):
    measurement: Measurement


class Alarm(_Event):
    """One alarm, raised or cleared."""

    station: Name
    kind: AlarmKind
    source: Name = Field(description="device name, channel or 'station'")
    active: bool
    acknowledged: bool = False
    message: str
    time_utc: datetime

    @model_validator(mode="before")
    @classmethod
    def _drop_key(cls, data: Any) -> Any:
        """Accept the serialized ``key`` back (it is derived), if it matches kind and source."""
        if isinstance(data, dict) and "key" in data:
            data = dict(data)
            key = data.pop("key")
            kind, source = data.get("kind"), data.get("source")
            kind_text = kind.value if isinstance(kind, AlarmKind) else kind
            if key != f"{kind_text}:{source}":
                raise ValueError(
                    f"key {key!r} does not match kind {kind_text!r} and source {source!r}"
                )
        return data

    @computed_field(description="'<kind>:<source>', the id used by the ack_alarm command")  # type: ignore[prop-decorator]
    @property
    def key(self) -> str:
        return f"{self.kind.value}:{self.source}"


class AlarmChanged(_Event):
    alarm: Alarm


class DeviceStatus(_Event):
    """One device's connection and health (retained per device on MQTT)."""

    station: Name
    device: Name
    connected: bool
    port: str
    sample_rate_hz: float | None = None
    frame_errors: int = Field(default=0, ge=0)
    last_value: float | None = None
    model: str = ""
    firmware: str = ""
    last_t_mono_s: float | None = Field(
        default=None, description="the service's monotonic clock at the last value"
    )


Event = LiveReading | CaptureStateChanged | MeasurementCaptured | AlarmChanged | DeviceStatus
EVENT_TYPES: tuple[type[_Event], ...] = (
    LiveReading,
    CaptureStateChanged,
    MeasurementCaptured,
    AlarmChanged,
    DeviceStatus,
)


def station_of(event: Event) -> str:
    """The station an event came from."""
    if isinstance(event, MeasurementCaptured):
        return event.measurement.station
    if isinstance(event, AlarmChanged):
        return event.alarm.station
    return event.station


@dataclass
class Subscription:
    """A bounded queue of events; iterate it with ``async for``."""

    queue: asyncio.Queue[Event]
    dropped: int = 0
    _bus: EventBus | None = field(default=None, repr=False)

    def put(self, event: Event) -> None:
        if self.queue.full():
            self.queue.get_nowait()  # drop the oldest: never block the publisher
            self.dropped += 1
        self.queue.put_nowait(event)

    def close(self) -> None:
        if self._bus is not None:
            self._bus.unsubscribe(self)
            self._bus = None

    async def __aiter__(self) -> AsyncIterator[Event]:
        while True:
            yield await self.queue.get()


class EventBus:
    """Synchronous, non-blocking fan-out to any number of bounded subscriber queues."""

    def __init__(self) -> None:
        self._subs: list[Subscription] = []

    def subscribe(self, maxsize: int = 10_000) -> Subscription:
        sub = Subscription(asyncio.Queue(maxsize=maxsize), _bus=self)
        self._subs.append(sub)
        return sub

    def unsubscribe(self, sub: Subscription) -> None:
        if sub in self._subs:
            self._subs.remove(sub)

    def publish(self, event: Event) -> None:
        for sub in self._subs:
            sub.put(event)
