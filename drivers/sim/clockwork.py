"""The clockwork every simulated device shares: what it says, and when, on the bench's clock.

A device never reads a clock and never touches a port. The caller tells it the time:

* ``boot(t)`` powers it up (a beam prints its banner and HELLO a little later);
* ``advance(t)`` returns every frame due up to ``t``, each stamped with the time it was due
  (samples fall on a fixed grid ``origin + n / rate``, so the output does not depend on when the
  caller happens to wake up);
* ``command(line, t)`` handles one line from the host and returns the immediate replies;
* ``next_due_s()`` says when the next frame is due, so a writer can sleep until then.

The same object therefore runs in real time behind a pseudo-terminal (``pty_server``) and in
virtual time for recordings (``scenario``), with identical bytes for the same seed.
"""

from __future__ import annotations

import abc
import heapq
import math

from heft.drivers.sim.definitions import AnyDefinition

Frame = tuple[float, bytes]  # (due time on the bench clock in seconds, bytes on the wire)


class SimDevice(abc.ABC):
    """Common clockwork: a sample grid, a queue of delayed frames, a silent fault."""

    def __init__(self, definition: AnyDefinition, *, seed: int) -> None:
        self.definition = definition
        self.name = definition.name
        self.seed = seed
        self.rate_hz = float(definition.rate_hz)
        self.silent = False  # fault: the device stops talking and listening
        self._queue: list[tuple[float, int, bytes]] = []
        self._queue_n = 0
        self._origin_s = 0.0
        self._n = 0
        self._sampling = False

    @property
    def period_s(self) -> float:
        return 1.0 / self.rate_hz

    def boot(self, t_s: float) -> None:
        """Power up at ``t_s``: clear queued output and start sampling."""
        self._queue.clear()
        self._start_sampling(t_s)

    def advance(self, t_s: float) -> list[Frame]:
        """Every frame due at or before ``t_s``, in time order."""
        out: list[Frame] = []
        while True:
            t_sample = self._origin_s + self._n * self.period_s if self._sampling else math.inf
            t_queued = self._queue[0][0] if self._queue else math.inf
            if min(t_sample, t_queued) > t_s:
                break
            if t_queued <= t_sample:
                t, _, data = heapq.heappop(self._queue)
                out.append((t, data))
            else:
                self._n += 1
                out.extend((t_sample, data) for data in self._sample(t_sample))
        return [] if self.silent else out

    def command(self, line: bytes, t_s: float) -> list[Frame]:
        """Handle one line from the host (line end already removed)."""
        if self.silent:
            return []
        text = line.decode("ascii", errors="replace").strip()
        return [(t_s, data) for data in self._command(text, t_s)]

    def next_due_s(self) -> float:
        t_sample = self._origin_s + self._n * self.period_s if self._sampling else math.inf
        return min(t_sample, self._queue[0][0] if self._queue else math.inf)

    def _start_sampling(self, t_s: float) -> None:
        self._origin_s = t_s
        self._n = 0
        self._sampling = True

    def _later(self, t_s: float, data: bytes) -> None:
        self._queue_n += 1
        heapq.heappush(self._queue, (t_s, self._queue_n, data))

    @abc.abstractmethod
    def _sample(self, t_s: float) -> list[bytes]:
        """Take one sample at ``t_s``; return what the device sends for it (maybe nothing)."""

    @abc.abstractmethod
    def _command(self, text: str, t_s: float) -> list[bytes]:
        """Replies to one host command."""
