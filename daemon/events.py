"""Events the service emits, and the in-process bus that fans them out.

The dashboard, the MQTT publisher and tests are all subscribers; none of them owns hardware.
A slow subscriber loses its oldest events rather than slowing capture (its queue is bounded);
measurements are durable in the database anyway, so a subscriber can always catch up from there.
"""

from __future__ import annotations

import asyncio
import enum
from collections.abc import AsyncIterator
from dataclasses import dataclass, field
from datetime import datetime

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


@dataclass(frozen=True, slots=True)
class LiveReading:
    station: str
    channel: str  # '<device>/<index>'
    t_mono_s: float
    value_g: float
    flags: Flag


@dataclass(frozen=True, slots=True)
class CaptureStateChanged:
    station: str
    state: CaptureState
    t_mono_s: float
    detail: str = ""


@dataclass(frozen=True, slots=True)
class MeasurementCaptured:
    measurement: Measurement


@dataclass(frozen=True, slots=True)
class Alarm:
    station: str
    kind: AlarmKind
    source: str  # device name, channel or 'station'
    active: bool
    message: str
    time_utc: datetime
    acknowledged: bool = False

    @property
    def key(self) -> str:
        return f"{self.kind.value}:{self.source}"


@dataclass(frozen=True, slots=True)
class AlarmChanged:
    alarm: Alarm


@dataclass(frozen=True, slots=True)
class DeviceStatus:
    station: str
    device: str
    connected: bool
    port: str
    sample_rate_hz: float | None = None
    frame_errors: int = 0
    last_value: float | None = None
    last_t_mono_s: float | None = None
    model: str = ""
    firmware: str = ""


Event = LiveReading | CaptureStateChanged | MeasurementCaptured | AlarmChanged | DeviceStatus


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
