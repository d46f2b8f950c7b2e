"""One open device: a transport, its driver, polling, timestamps and command replies.

``DeviceSession.outputs()`` opens the transport, sends the driver's opening bytes, polls when the
driver needs it, stamps every chunk with the host's monotonic clock on arrival and yields what
the driver makes of it. Boot banners and bad frames are the driver's business (counted, never
fatal). A lost port raises ``TransportError`` out of ``outputs()``; the session does not retry:
the service's supervisor reconnects.
"""

from __future__ import annotations

import asyncio
import contextlib
import logging
import time
from collections import deque
from collections.abc import AsyncIterator, Callable

from heft.drivers.base import CommandReply, DeviceSilentError, Driver, TransportError
from heft.drivers.reading import DriverOutput
from heft.drivers.transport import Transport

log = logging.getLogger("heft.session")


class DeviceSession:
    """Reads one device through ``transport`` with ``driver``.

    Args:
        device_name: The configured device name (used in messages).
        driver: The protocol driver (its ``stats`` keep counting across reconnects).
        transport: Not yet opened; ``outputs()`` opens and closes it.
        clock: Monotonic clock in seconds (injectable for tests).
        silence_timeout_s: Raise ``DeviceSilentError`` after this long without a byte
            (None: wait for ever).
    """

    def __init__(
        self,
        device_name: str,
        driver: Driver,
        transport: Transport,
        *,
        clock: Callable[[], float] = time.monotonic,
        silence_timeout_s: float | None = None,
    ) -> None:
        self.device_name = device_name
        self.driver = driver
        self.transport = transport
        self._clock = clock
        self._silence_timeout_s = silence_timeout_s
        self._open = False
        self._waiting: deque[tuple[str, asyncio.Future[CommandReply]]] = deque()
        self.last_rx_mono_s: float | None = None

    @property
    def is_open(self) -> bool:
        return self._open

    async def outputs(self) -> AsyncIterator[DriverOutput]:
        """Open the device and yield its outputs until the port is lost (TransportError)."""
        loop = asyncio.get_running_loop()
        self.driver.reset()
        await self.transport.open()
        self._open = True
        pending: asyncio.Future[bytes] | None = None
        try:
            opening = self.driver.on_open()
            if opening:
                await self.transport.write(opening)
            interval = self.driver.poll_interval_s
            poll = self.driver.poll_request() if interval else None
            # Polls and silence run on the loop's clock (real time); ``clock`` only stamps.
            next_poll = last_rx = loop.time()
            while True:
                if poll is not None and interval is not None and loop.time() >= next_poll:
                    await self.transport.write(poll)
                    next_poll = loop.time() + interval
                if pending is None:
                    pending = asyncio.ensure_future(self.transport.read())
                timeout = self._wait_time(loop.time(), next_poll if poll else None, last_rx)
                done, _ = await asyncio.wait({pending}, timeout=timeout)
                if not done:
                    self._check_silence(loop.time() - last_rx)
                    continue
                chunk = pending.result()  # raises TransportError on loss
                pending = None
                last_rx = loop.time()
                stamp = self.last_rx_mono_s = self._arrival_stamp()
                produced = self.driver.feed(chunk, stamp)
                self._deliver_replies()
                for item in produced:
                    yield item
        finally:
            self._open = False
            if pending is not None:
                pending.cancel()
                with contextlib.suppress(asyncio.CancelledError, TransportError):
                    await pending
            for _, fut in self._waiting:
                if not fut.done():
                    fut.set_exception(TransportError(f"device {self.device_name!r} closed"))
            self._waiting.clear()
            await self.transport.close()

    def _arrival_stamp(self) -> float:
        """The arrival time of the chunk just read.

        A recording transport already read the clock when the chunk arrived and wrote that
        number to its file; using the same number keeps live and replayed timelines identical.
        """
        recorded = getattr(self.transport, "last_rx_mono_s", None)
        return recorded if isinstance(recorded, float) else self._clock()

    def _wait_time(self, now: float, next_poll: float | None, last_rx: float) -> float | None:
        deadlines = []
        if next_poll is not None:
            deadlines.append(next_poll)
        if self._silence_timeout_s is not None:
            deadlines.append(last_rx + self._silence_timeout_s)
        if not deadlines:
            return None
        return max(0.0, min(deadlines) - now)

    def _check_silence(self, quiet_s: float) -> None:
        if self._silence_timeout_s is not None and quiet_s >= self._silence_timeout_s:
            raise DeviceSilentError(
                f"device {self.device_name!r} ({self.transport.description}) sent nothing for "
                f"{quiet_s:.1f} s")

    def _deliver_replies(self) -> None:
        """Hand each reply to the oldest caller waiting for that command (or any, if unknown)."""
        for reply in self.driver.pop_replies():
            log.debug("device %r replied %s", self.device_name, reply)
            for entry in self._waiting:
                name, fut = entry
                if not fut.done() and reply.command in (name, "?"):
                    fut.set_result(reply)
                    self._waiting.remove(entry)
                    break

    async def send_command(
        self, name: str, arg: str | None = None, *, reply_timeout_s: float | None = None
    ) -> CommandReply | None:
        """Send a host command ('zero', 'tare', 'identify', 'rate', 'reboot').

        With ``reply_timeout_s`` (and ``outputs()`` running), wait that long for the device's
        reply to this command and return it (None on timeout; ``CommandReply.ok`` says whether
        the device did it). Raises ``UnsupportedCommand`` for a command the
        driver lacks and ``TransportError`` when the port is not open or fails.
        """
        data = self.driver.command(name, arg)
        if not self._open:
            raise TransportError(f"device {self.device_name!r} is not open")
        fut: asyncio.Future[CommandReply] | None = None
        if reply_timeout_s is not None:
            fut = asyncio.get_running_loop().create_future()
            self._waiting.append((name, fut))
        await self.transport.write(data)
        if fut is None:
            return None
        try:
            return await asyncio.wait_for(fut, reply_timeout_s)
        except TimeoutError:
            with contextlib.suppress(ValueError):
                self._waiting.remove((name, fut))
            return None
