"""Where the dashboard's events come from, and where its commands go.

The dashboard never owns hardware. It reads events from an :class:`EventSource` and sends
commands through it:

- :class:`InProcessSource`: the service runs in the same process (``heft demo``); the dashboard is
  one more bus subscriber. With ``service_loop`` given, the service runs on its own thread and
  event loop, so a slow redraw or an exception in the UI cannot delay or stop capture.
- :class:`tui.mqtt_source.MqttSource`: a running service over MQTT (``heft dash``).
- :class:`ScriptedSource`: a replay of a fixed list of events, for tests and snapshots.
"""

from __future__ import annotations

import abc
import asyncio
import contextlib
from collections.abc import Awaitable, Callable, Iterable, Sequence
from concurrent.futures import Future
from typing import Any, Protocol

from heft.daemon.command_api import Command, Reply
from heft.daemon.events import Event, EventBus, Subscription
from heft.daemon.measurement import Measurement

INBOX_SIZE = 20_000  # about a minute of four channels at 80 samples/s
BATCH_MAX = 5_000

CommandHandler = Callable[[Command], Awaitable[Reply]]


class MeasurementHistory(Protocol):
    """The part of the store the dashboard reads: recent measurements, oldest first or newest."""

    def recent_measurements(self, limit: int) -> Sequence[Measurement]: ...


def read_only_reply(cmd: Command) -> Reply:
    return Reply(
        ok=False,
        command=cmd.command,
        request_id=cmd.request_id,
        message="read-only dashboard: start it with --commands to send commands",
    )


class EventSource(abc.ABC):
    """A stream of service events plus a command channel.

    Subclasses deliver events with :meth:`_deliver` (on the UI's loop); the app awaits
    :meth:`next_batch`, which returns every event queued so far in one list.
    """

    commands_enabled: bool = True
    label: str = ""

    def __init__(self) -> None:
        self._inbox: asyncio.Queue[Event] | None = None
        self.dropped = 0
        self.status_text = ""
        self.retry_at_s: float | None = None  # monotonic time of the next reconnect attempt

    @property
    def inbox(self) -> asyncio.Queue[Event]:
        if self._inbox is None:
            self._inbox = asyncio.Queue(maxsize=INBOX_SIZE)
        return self._inbox

    def _deliver(self, events: Iterable[Event]) -> None:
        inbox = self.inbox
        for event in events:
            if inbox.full():
                inbox.get_nowait()  # the oldest goes: a live value is superseded anyway
                self.dropped += 1
            inbox.put_nowait(event)

    async def next_batch(self) -> list[Event]:
        """Wait for at least one event, then return all that are queued (at most BATCH_MAX)."""
        inbox = self.inbox
        batch = [await inbox.get()]
        while not inbox.empty() and len(batch) < BATCH_MAX:
            batch.append(inbox.get_nowait())
        return batch

    async def start(self) -> None:  # noqa: B027 - optional hook
        """Begin delivering events (called once the app's loop runs)."""

    def connection_text(self, now_s: float) -> str:
        """The link to the service in words; '' when there is none to speak of (in-process)."""
        return ""

    def calibrating(self, active: bool) -> str:
        """The calibration screen opened (True) or closed (False).

        Returns a note for the operator about what the source did (e.g. the demo pausing its
        placements), or ''.
        """
        return ""

    async def stop(self) -> None:  # noqa: B027 - optional hook
        """Stop delivering events and release connections."""

    @abc.abstractmethod
    async def _send(self, cmd: Command) -> Reply: ...

    async def send(self, cmd: Command) -> Reply:
        """Send a command; any failure comes back as a Reply with ``ok=False``, never raised."""
        if not self.commands_enabled:
            return read_only_reply(cmd)
        try:
            return await self._send(cmd)
        except Exception as err:  # a failing command must not take the dashboard down
            return Reply(
                ok=False, command=cmd.command, request_id=cmd.request_id, message=f"{err}"
            )

    async def backfill(self, limit: int) -> list[Measurement]:
        """Recent measurements from before the dashboard started (oldest first)."""
        return []

    def known_jobs(self) -> list[str]:
        """Jobs the service knows (from its config), for the job picker."""
        return []

    def select_station(self, station: str) -> None:  # noqa: B027 - optional hook
        """Direct commands to ``station`` from now on."""


class ScriptedSource(EventSource):
    """Replays a fixed list of events; commands are recorded and answered by ``reply``.

    Args:
        events: delivered in order as soon as the app starts.
        reply: answers each command (default: ``ok=True``); what it is given is kept in ``sent``.
        jobs: what :meth:`known_jobs` reports.
        commands_enabled: False makes the dashboard read-only, as ``heft dash`` without --commands.
    """

    label = "scripted replay"

    def __init__(
        self,
        events: Sequence[Event],
        *,
        reply: Callable[[Command], Reply] | None = None,
        jobs: Sequence[str] = (),
        commands_enabled: bool = True,
        backfill: Sequence[Measurement] = (),
    ) -> None:
        super().__init__()
        self._events = list(events)
        self._reply = reply
        self._jobs = list(jobs)
        self._backfill = list(backfill)
        self.commands_enabled = commands_enabled
        self.sent: list[Command] = []
        self.status_text = "replay"

    async def start(self) -> None:
        self._deliver(self._events)

    def push(self, *events: Event) -> None:
        """Deliver more events now (a test playing the service)."""
        self._deliver(events)

    async def _send(self, cmd: Command) -> Reply:
        self.sent.append(cmd)
        if self._reply is not None:
            return self._reply(cmd)
        return Reply(ok=True, command=cmd.command, request_id=cmd.request_id)

    async def backfill(self, limit: int) -> list[Measurement]:
        return self._backfill[-limit:]

    def known_jobs(self) -> list[str]:
        return list(self._jobs)


class InProcessSource(EventSource):
    """The service's own bus and command handler, in this process.

    Args:
        bus: the service's EventBus; the dashboard takes one bounded subscription.
        handle_command: the service's ``handle_command``.
        store: recent measurements for the back-fill (optional).
        service_loop: the loop the service runs on when it has its own thread; ``None`` when the
            service shares the dashboard's loop.
        jobs: job names from the station config, for the picker.
        subscription: a subscription taken before the service started, so that its first
            events (devices found, calibration alarms) are not missed; default: subscribe now.
        on_calibrating: told when the calibration screen opens and closes (the demo pauses
            its simulated placements); returns a note for the screen.
    """

    label = "in-process service"

    def __init__(
        self,
        bus: EventBus,
        handle_command: CommandHandler,
        store: MeasurementHistory | None = None,
        *,
        service_loop: asyncio.AbstractEventLoop | None = None,
        jobs: Sequence[str] = (),
        subscription: Subscription | None = None,
        on_calibrating: Callable[[bool], str] | None = None,
    ) -> None:
        super().__init__()
        self._on_calibrating = on_calibrating
        self._bus = bus
        self._early = subscription
        self._handle_command = handle_command
        self._store = store
        self._service_loop = service_loop
        self._jobs = list(jobs)
        self._forwarder: Future[None] | asyncio.Task[None] | None = None
        self.status_text = "service in this process"

    async def start(self) -> None:
        ui_loop = asyncio.get_running_loop()
        _ = self.inbox  # created here, on the dashboard's loop, before any delivery
        if self._service_loop is None or self._service_loop is ui_loop:
            self._forwarder = asyncio.create_task(self._forward(None))
        else:
            self._forwarder = asyncio.run_coroutine_threadsafe(
                self._forward(ui_loop), self._service_loop
            )

    async def _forward(self, ui_loop: asyncio.AbstractEventLoop | None) -> None:
        """Runs on the service's loop: moves events from the bus to the dashboard in batches."""
        sub, self._early = self._early or self._bus.subscribe(maxsize=INBOX_SIZE), None
        try:
            while True:
                batch = [await sub.queue.get()]
                while not sub.queue.empty() and len(batch) < BATCH_MAX:
                    batch.append(sub.queue.get_nowait())
                if ui_loop is None:
                    self._deliver(batch)
                else:
                    try:
                        ui_loop.call_soon_threadsafe(self._deliver, batch)
                    except RuntimeError:  # the dashboard's loop has closed: stop quietly
                        return
                    # Give the service's own tasks a turn between batches.
                    await asyncio.sleep(0.02)
        finally:
            sub.close()
            self.dropped += sub.dropped

    async def stop(self) -> None:
        forwarder, self._forwarder = self._forwarder, None
        if forwarder is None:
            return
        forwarder.cancel()
        if isinstance(forwarder, asyncio.Task):
            with contextlib.suppress(asyncio.CancelledError):
                await forwarder

    async def _on_service_loop(self, make: Callable[[], Awaitable[Any]]) -> Any:
        if self._service_loop is None or self._service_loop is asyncio.get_running_loop():
            return await make()

        async def call() -> Any:
            return await make()

        return await asyncio.wrap_future(
            asyncio.run_coroutine_threadsafe(call(), self._service_loop)
        )

    async def _send(self, cmd: Command) -> Reply:
        reply: Reply = await self._on_service_loop(lambda: self._handle_command(cmd))
        return reply

    async def backfill(self, limit: int) -> list[Measurement]:
        store = self._store
        if store is None:
            return []

        async def read() -> list[Measurement]:
            # On the service's thread: an SQLite connection belongs to the thread that opened it.
            return list(store.recent_measurements(limit))

        rows: list[Measurement] = await self._on_service_loop(read)
        return sorted(rows, key=lambda m: (m.time_utc, m.seq))

    def known_jobs(self) -> list[str]:
        return list(self._jobs)

    def calibrating(self, active: bool) -> str:
        return self._on_calibrating(active) if self._on_calibrating is not None else ""
