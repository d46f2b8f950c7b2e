"""A pseudo-terminal that sends beam frames as fast as the reader takes them, or at a set rate.

The frames are the simulated beam's own (``drivers.sim``, seeded, virtual time), so every line is
a valid sample with real noise and real placements. The writer thread only waits for the pty to
become writable: when the reader falls behind, the kernel's pty buffer fills and the writer
waits, so in flood mode the rate written is the rate the reader drains.
"""

from __future__ import annotations

import contextlib
import os
import select
import threading
import time
import tty
from pathlib import Path
from types import TracebackType

from heft.drivers.sim.definitions import BeamDef
from heft.drivers.sim.devices import make_device
from heft.drivers.sim.physics import BenchTimeline, make_geometry
from tests.bench.rig import demo_plan


def beam_frames(definition: BeamDef, count: int, *, seed: int = 11) -> list[bytes]:
    """``count`` sample lines of the simulated beam, a club placed every 3 s (virtual time)."""
    period = 1.0 / definition.rate_hz
    plan = demo_plan(count=int(count * period / 3.0) + 2, period_s=3.0, on_s=2.0)
    device = make_device(definition, BenchTimeline(make_geometry("two_support"), plan), seed=seed)
    device.boot(0.0)
    out: list[bytes] = []
    t = 0.0
    while len(out) < count:
        t += 0.25
        out.extend(data for _, data in device.advance(t) if data.startswith(b"$"))
    return out[:count]


class FloodPty:
    """Serve ``frames`` in a loop on a new pty behind the symlink ``link``.

    Args:
        frames: lines to send, repeated for ever.
        link: stable path for clients.
        rate_hz: lines per second, or None to send as fast as the reader drains.
    """

    def __init__(self, frames: list[bytes], link: Path, rate_hz: float | None = None) -> None:
        self.frames = frames
        self.link = link
        self.rate_hz = rate_hz
        self.lines_sent = 0
        self._stop = threading.Event()
        self._master, self._slave = os.openpty()
        tty.setraw(self._slave)
        os.set_blocking(self._master, False)
        with contextlib.suppress(FileNotFoundError):
            link.unlink()
        link.symlink_to(os.ttyname(self._slave))
        self._thread = threading.Thread(target=self._run, name="flood", daemon=True)

    def __enter__(self) -> FloodPty:
        self._thread.start()
        return self

    def __exit__(
        self, et: type[BaseException] | None, e: BaseException | None, tb: TracebackType | None
    ) -> None:
        self._stop.set()
        self._thread.join(5)
        for fd in (self._master, self._slave):
            with contextlib.suppress(OSError):
                os.close(fd)
        with contextlib.suppress(FileNotFoundError):
            self.link.unlink()

    def rate_since(self, t0: float, n0: int) -> float:
        return (self.lines_sent - n0) / max(1e-9, time.monotonic() - t0)

    def _run(self) -> None:
        pending = b""
        i = 0
        queued = 0  # lines handed to `pending` so far
        t0 = time.monotonic()
        n_frames = len(self.frames)
        while not self._stop.is_set():
            if self.rate_hz is None:
                want = queued + 256 if len(pending) < 16384 else queued
            else:
                want = int(self.rate_hz * (time.monotonic() - t0))
                # Lines not taken while no reader was there are not owed later (no burst).
                queued = max(queued, want - int(self.rate_hz * 0.1))
            if want > queued:
                block = [self.frames[(i + k) % n_frames] for k in range(want - queued)]
                i = (i + len(block)) % n_frames
                pending += b"".join(block)
                queued = want
            if not pending:
                time.sleep(0.002)
                continue
            _, writable, _ = select.select([], [self._master], [], 0.05)
            if not writable:
                continue
            try:
                n = os.write(self._master, pending[:65536])
            except BlockingIOError:
                continue
            except OSError:
                time.sleep(0.01)  # no reader on the slave right now
                continue
            self.lines_sent += pending[:n].count(b"\n")
            pending = pending[n:]
