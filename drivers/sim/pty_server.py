"""Serve a simulated device on a pseudo-terminal, so clients use real pyserial on a real tty.

``PtyDevice`` owns the master side of a pty and a background thread. The thread asks the device
what is due (``SimDevice.advance``) on the bench clock and writes it; it reads host commands
from the master and hands each line to ``SimDevice.command``. What to send is decided by the
device (pure, seeded); only *when* is real time here.

What a pyserial client on the slave sees when the device is unplugged (master closed), measured
on Linux with pyserial 3.5 (see tests/test_sim_pty.py):

* ``read()`` raises ``serial.SerialException`` ("device reports readiness to read but returned
  no data ..."): select says readable, the read returns no bytes;
* ``write()`` raises ``serial.SerialException`` (EIO);
* ``in_waiting`` raises a bare ``OSError`` (EIO), not ``SerialException``;
* the ``/dev/pts/N`` node disappears once the client closes, so reopening it fails; the stable
  symlink is removed at unplug (like a USB by-id link) and comes back on ``replug()``.

While no client has the port open, the kernel keeps what the device wrote up to its buffer size
and later writes are dropped (the writer never blocks). pyserial flushes the input buffer when it
opens a port, so a client starts with what the device sends after it opened, usually in the
middle of a line, as with a real adapter: the drivers resynchronise on the next line end.
"""

from __future__ import annotations

import contextlib
import os
import queue
import select
import threading
import time
import tty
from collections.abc import Callable, Iterator
from pathlib import Path
from types import TracebackType
from typing import Self

from heft.drivers.sim.devices import Frame, SimDevice

_IDLE_WAKE_S = 0.05  # the longest the thread sleeps without checking for requests


def check_link_replaceable(link: Path) -> None:
    """Refuse a link path that holds anything but a (possibly stale) link to a pseudo-terminal.

    The link is replaced atomically on every (re)plug; it must never clobber a user's file.
    """
    if not os.path.lexists(link):
        return
    if link.is_symlink() and str(link.readlink()).startswith("/dev/pts/"):
        return
    raise FileExistsError(
        f"{link} exists and is not a link to a pseudo-terminal; refusing to replace it"
    )


class PtyDevice:
    """A simulated device on a pseudo-terminal, served from a background thread.

    Args:
        device: the simulated device (booted when the port opens and on each replug).
        link: optional stable symlink to the current ``/dev/pts/N``.
        clock: monotonic clock in seconds; the bench clock is ``clock() - origin_s``.
        origin_s: the ``clock()`` reading that is bench time 0. Default: the moment ``start()``
            runs. Give several devices the same origin so they share one bench clock (two
            scales under the two supports of one bench).
        on_frame: called in the server thread with each frame written (for spies and logs).
    """

    def __init__(
        self,
        device: SimDevice,
        *,
        link: str | Path | None = None,
        clock: Callable[[], float] = time.monotonic,
        origin_s: float | None = None,
        on_frame: Callable[[Frame], None] | None = None,
    ) -> None:
        self.device = device
        self.link = Path(link) if link is not None else None
        if self.link is not None:
            check_link_replaceable(self.link)
        self._clock = clock
        self._origin_s = origin_s
        self._on_frame = on_frame
        self._lock = threading.RLock()
        self._requests: queue.SimpleQueue[tuple[str, threading.Event]] = queue.SimpleQueue()
        self._wake_r, self._wake_w = os.pipe()
        os.set_blocking(self._wake_w, False)
        self._master: int | None = None
        self._slave: int | None = None
        self._port: str | None = None
        self._t0 = 0.0
        self._rx = b""
        self._thread: threading.Thread | None = None
        self._stopping = False
        self.bytes_written = 0
        self.bytes_dropped = 0
        self.commands_received = 0
        self.error: BaseException | None = None  # set if the server thread died

    # --- public surface -----------------------------------------------------------------------

    @property
    def port(self) -> str:
        """The current ``/dev/pts/N`` (changes on each replug)."""
        if self._port is None:
            raise RuntimeError(f"{self.device.name}: not plugged in")
        return self._port

    @property
    def path(self) -> str:
        """What a client should open: the stable link if there is one, else the port."""
        return str(self.link) if self.link is not None else self.port

    @property
    def plugged(self) -> bool:
        return self._master is not None

    def bench_time_s(self) -> float:
        """Seconds on the bench clock (0 when ``start()`` ran)."""
        return self._clock() - self._t0

    def start(self) -> Self:
        """Open the pty, boot the device and start serving. Returns self."""
        if self._thread is not None:
            raise RuntimeError(f"{self.device.name}: already started")
        if self._origin_s is None:
            self._t0 = self._clock()
            self._open(boot_s=0.0)  # exactly 0: the same sample grid as a virtual-time run
        else:
            self._t0 = self._origin_s
            self._open()
        self._thread = threading.Thread(
            target=self._serve, name=f"sim-{self.device.name}", daemon=True
        )
        self._thread.start()
        return self

    def unplug(self, timeout_s: float = 5.0) -> None:
        """Close the pty as a pulled cable would: the client's reads and writes fail."""
        self._request("unplug", timeout_s)

    def replug(self, timeout_s: float = 5.0) -> None:
        """A new pty; the link now points at it; the device boots again."""
        self._request("replug", timeout_s)

    def close(self, timeout_s: float = 5.0) -> None:
        """Stop the thread and close everything (idempotent)."""
        if self._thread is not None and self._thread.is_alive():
            self._stopping = True
            self._wake()
            self._thread.join(timeout_s)
        self._close_pty()
        for fd in (self._wake_r, self._wake_w):
            with contextlib.suppress(OSError):
                os.close(fd)
        self._wake_r = self._wake_w = -1

    @contextlib.contextmanager
    def locked(self) -> Iterator[SimDevice]:
        """Hold the device still while changing it from another thread (unit, silent fault)."""
        with self._lock:
            yield self.device

    def __enter__(self) -> Self:
        return self.start()

    def __exit__(
        self, et: type[BaseException] | None, e: BaseException | None, tb: TracebackType | None
    ) -> None:
        self.close()

    async def __aenter__(self) -> Self:
        return self.start()

    async def __aexit__(
        self, et: type[BaseException] | None, e: BaseException | None, tb: TracebackType | None
    ) -> None:
        import asyncio

        await asyncio.to_thread(self.close)

    # --- pty handling (server thread, or before it starts) ----------------------------------

    def _open(self, boot_s: float | None = None) -> None:
        master, slave = os.openpty()
        tty.setraw(slave)  # no echo, no line editing, no CR/LF translation
        os.set_blocking(master, False)
        self._master, self._slave = master, slave
        self._port = os.ttyname(slave)
        self._rx = b""
        if self.link is not None:
            tmp = self.link.with_name(f".{self.link.name}.{os.getpid()}.tmp")
            with contextlib.suppress(FileNotFoundError):
                tmp.unlink()
            tmp.symlink_to(self._port)
            tmp.replace(self.link)  # atomic: a client never sees a missing or half-made link
        with self._lock:
            self.device.boot(self.bench_time_s() if boot_s is None else boot_s)

    def _close_pty(self) -> None:
        if self.link is not None and self._port is not None:
            with contextlib.suppress(FileNotFoundError):
                if self.link.is_symlink() and str(self.link.readlink()) == self._port:
                    self.link.unlink()
        for fd in (self._master, self._slave):
            if fd is not None:
                with contextlib.suppress(OSError):
                    os.close(fd)
        self._master = self._slave = None
        self._port = None

    def _request(self, action: str, timeout_s: float) -> None:
        if self._thread is None or not self._thread.is_alive():
            raise RuntimeError(f"{self.device.name}: server not running")
        done = threading.Event()
        self._requests.put((action, done))
        self._wake()
        if not done.wait(timeout_s):
            raise TimeoutError(f"{self.device.name}: {action} not done within {timeout_s} s")

    def _wake(self) -> None:
        with contextlib.suppress(OSError):
            os.write(self._wake_w, b"x")

    def _serve(self) -> None:
        try:
            while not self._stopping:
                self._handle_requests()
                with self._lock:
                    now = self.bench_time_s()
                    if self._master is not None:
                        self._write(self.device.advance(now))
                    due = self.device.next_due_s()
                timeout = min(max(due - now, 0.0), _IDLE_WAKE_S)
                fds = [self._wake_r] if self._master is None else [self._wake_r, self._master]
                readable, _, _ = select.select(fds, [], [], timeout)
                if self._wake_r in readable:
                    with contextlib.suppress(BlockingIOError):
                        os.read(self._wake_r, 1024)
                if self._master is not None and self._master in readable:
                    self._read()
        except BaseException as err:  # recorded for the owner; the thread ends
            self.error = err
            raise

    def _handle_requests(self) -> None:
        while True:
            try:
                action, done = self._requests.get_nowait()
            except queue.Empty:
                return
            if action == "unplug":
                self._close_pty()
            elif action == "replug":
                self._close_pty()
                self._open()
            done.set()

    def _read(self) -> None:
        assert self._master is not None
        try:
            data = os.read(self._master, 4096)
        except (BlockingIOError, InterruptedError):
            return
        except OSError:
            return  # EIO: no client has the slave open right now
        self._rx += data
        *lines, self._rx = self._rx.replace(b"\r", b"\n").split(b"\n")
        for line in lines:
            if not line.strip():
                continue
            self.commands_received += 1
            with self._lock:
                self._write(self.device.command(line, self.bench_time_s()))

    def _write(self, frames: list[Frame]) -> None:
        for frame in frames:
            data = frame[1]
            assert self._master is not None
            try:
                n = os.write(self._master, data)
            except BlockingIOError:
                n = 0
            except OSError:
                n = 0
            self.bytes_written += n
            self.bytes_dropped += len(data) - n
            if self._on_frame is not None:
                self._on_frame(frame)
