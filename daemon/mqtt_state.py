"""What the station's MQTT link publishes from the event bus: state it keeps and re-publishes.

Capture state, device status and the active alarms are retained on the broker; this module
keeps the newest encoded copy of each in memory and publishes it again after every (re)connect,
so the retained copies are always current. Live readings are throttled per channel; alarm
changes stream as events. Every payload comes from the wire codec (``heft.daemon.wire``).
"""

from __future__ import annotations

import asyncio
import contextlib
import logging
import math
from collections import deque
from collections.abc import Callable, Iterable
from datetime import UTC, datetime
from typing import Generic, TypeVar

import aiomqtt

from heft.daemon.events import (
    Alarm,
    AlarmChanged,
    CaptureStateChanged,
    DeviceStatus,
    Event,
    LiveReading,
    station_of,
)
from heft.daemon.mqtt_topics import TopicError
from heft.daemon.wire import ActiveAlarms, Outbound, Outgoing, WireCodec

log = logging.getLogger(__name__)

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


class StatePublisher:
    """Folds bus events into encoded publishes and sends them while a session is up.

    Args:
        codec: the wire codec (topic root).
        station: only this station's events are published (its subtree is the link's).
        live_max_rate_hz: most live readings per channel per second.
        clock: monotonic clock in seconds (live-reading throttle).
    """

    def __init__(
        self,
        codec: WireCodec,
        station: str,
        live_max_rate_hz: float,
        clock: Callable[[], float],
    ) -> None:
        self._codec = codec
        self.station = station
        self._clock = clock
        self.connected = False  # live readings are only worth keeping while connected
        self._capture: Outgoing | None = None
        self._devices: dict[str, Outgoing] = {}
        self._alarms: dict[str, Alarm] = {}
        self._alarm_events: deque[Outgoing] = deque(maxlen=1000)
        self._dirty_capture = False
        self._dirty_devices: set[str] = set()
        self._dirty_alarms = False
        self._live: LatestValueThrottle[str, Outgoing] = LatestValueThrottle(
            1.0 / live_max_rate_hz
        )
        self._bad_names: set[str] = set()
        self._changed = asyncio.Event()

    def restore_alarms(self, alarms: Iterable[Alarm]) -> None:
        """Alarms active before this process started (from the database)."""
        for alarm in alarms:
            self._alarms.setdefault(alarm.key, alarm)

    def apply_event(self, event: Event) -> None:
        """Fold one bus event into the state to publish (synchronous, never blocks)."""
        if station_of(event) != self.station:
            return  # another station's subtree is not this link's to publish
        now = datetime.now(UTC)
        if isinstance(event, LiveReading):
            if self.connected and (out := self._encode(event, now)) is not None:
                self._live.offer(event.channel, out)
        elif isinstance(event, CaptureStateChanged):
            self._capture = self._encode(event, now)
            self._dirty_capture = self._capture is not None
        elif isinstance(event, DeviceStatus):
            if (out := self._encode(event, now)) is not None:
                self._devices[event.device] = out
                self._dirty_devices.add(event.device)
        elif isinstance(event, AlarmChanged):
            alarm = event.alarm
            if alarm.active:
                self._alarms[alarm.key] = alarm
            else:
                self._alarms.pop(alarm.key, None)
            if (out := self._encode(event, now)) is not None:
                self._alarm_events.append(out)
            self._dirty_alarms = True
        else:
            return
        self._changed.set()

    def active_alarms(self) -> ActiveAlarms:
        return ActiveAlarms(
            station=self.station, time_utc=datetime.now(UTC), active=tuple(self._alarms.values())
        )

    def mark_all_dirty(self) -> None:
        """A new session: everything retained goes out again; stale live readings do not."""
        self._dirty_capture = self._capture is not None
        self._dirty_devices = set(self._devices)
        self._dirty_alarms = True  # always: replaces a stale retained list after a restart
        self._live.clear()
        self._changed.set()

    async def publish(self, client: aiomqtt.Client) -> None:
        """Publish whatever changed, forever (until cancelled or the session fails)."""
        while True:
            self._changed.clear()
            if self._dirty_capture and self._capture is not None:
                self._dirty_capture = False
                await send(client, self._capture)
            while self._dirty_devices:
                await send(client, self._devices[self._dirty_devices.pop()])
            if self._dirty_alarms:
                self._dirty_alarms = False
                await send(client, self._codec.encode(self.active_alarms()))
            while self._alarm_events:
                await send(client, self._alarm_events[0])
                self._alarm_events.popleft()
            for _, out in self._live.take_due(self._clock()):
                await send(client, out)
            due = self._live.next_due()
            timeout = None if due is None else max(0.0, due - self._clock())
            # asyncio.timeout, not wait_for: see mqtt_client.raise_if_cancel_requested.
            with contextlib.suppress(TimeoutError):
                async with asyncio.timeout(timeout):
                    await self._changed.wait()

    def _encode(self, message: Outbound, now: datetime) -> Outgoing | None:
        """Encode; a device-supplied name that cannot be a topic level is logged once, skipped."""
        try:
            return self._codec.encode(message, now_utc=now)
        except TopicError as err:
            if str(err) not in self._bad_names:
                self._bad_names.add(str(err))
                log.error("not published: %s", err)
            return None


async def send(client: aiomqtt.Client, out: Outgoing) -> None:
    await client.publish(out.topic, out.payload, qos=out.qos, retain=out.retain)
