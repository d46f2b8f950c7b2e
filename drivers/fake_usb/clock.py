"""When a simulated device's reports are due: its report timeline on a virtual or a real clock.

``pace="virtual"`` runs a virtual clock that jumps to the next report (tests never sleep);
``pace="realtime"`` waits on the wall clock (simulator, demo), and a host that reads too slowly
gets only the newest overdue report, as a scale answering an interrupt poll would send.
"""

from __future__ import annotations

import threading
import time
from collections.abc import Sequence
from typing import Final, Literal

from heft.drivers.fake_usb.fixtures import EndMode, ReportEvent

Pace = Literal["virtual", "realtime"]

# With nothing ever due, a virtual wait still passes this much real time, so a reader polling
# through timeouts does not spin a CPU.
_IDLE_REAL_WAIT_S: Final = 0.02


class ReportTimeline:
    """Events in time order (``t`` seconds from first open) and what comes after the last one.

    Args:
        events: Reports (and an optional unplug).
        end: After the last event: ``silent`` (nothing more), ``hold`` (repeat the last report
            every ``hold_interval_s``) or ``loop`` (start the sequence again).
        pace: ``virtual`` or ``realtime``.
        unplug_now: Set when the cable is pulled; a real wait ends at once.

    Not thread-safe by itself: the device holds its lock around ``next_event`` and ``advance``.
    """

    def __init__(self, events: Sequence[ReportEvent], *, end: EndMode, hold_interval_s: float,
                 pace: Pace, unplug_now: threading.Event) -> None:
        self.events = tuple(events)
        self.end = end
        self.hold_interval_s = hold_interval_s
        self.pace = pace
        self._unplug_now = unplug_now
        self._next = 0  # index of the next event
        self._offset_s = 0.0  # added to event times (loop / hold)
        self._virtual_now_s = 0.0
        self._opened_at: float | None = None

    def start(self) -> None:
        """The device was opened: realtime event times count from the first open."""
        if self._opened_at is None:
            self._opened_at = time.monotonic()

    def next_event(self, last_report: bytes | None) -> tuple[ReportEvent | None, float]:
        """The next event and when it is due (``None, inf`` when nothing will ever come)."""
        if self.pace == "realtime":
            # A scale sends its current report when polled: reports the host was too slow
            # to collect are gone, only the newest overdue one is delivered (never an unplug
            # skipped).
            now_s = self.now()
            while (self._next + 1 < len(self.events)
                   and self.events[self._next].rx is not None
                   and self.events[self._next + 1].t + self._offset_s <= now_s):
                self._next += 1
        if self._next < len(self.events):
            event = self.events[self._next]
            return event, event.t + self._offset_s
        if self.end == "hold" and last_report is not None:
            last = self.events[-1].t + self._offset_s if self.events else 0.0
            return ReportEvent(t=last + self.hold_interval_s, rx=last_report), (
                last + self.hold_interval_s)
        if self.end == "loop" and self.events:
            return self.events[0], self.events[-1].t + self._offset_s + self.hold_interval_s
        return None, float("inf")

    def advance(self) -> None:
        """Move past the event just delivered."""
        if self._next < len(self.events):
            due = self.events[self._next].t + self._offset_s
            self._next += 1
        elif self.end == "hold":
            due = (self.events[-1].t if self.events else 0.0) + self._offset_s + (
                self.hold_interval_s)
            self._offset_s += self.hold_interval_s
        else:  # loop: restart the timeline one interval after the last event
            self._offset_s += self.events[-1].t + self.hold_interval_s - self.events[0].t
            self._next = 1
            due = self.events[0].t + self._offset_s
        if self.pace == "virtual":
            self._virtual_now_s = max(self._virtual_now_s, due)

    def now(self) -> float:
        """Seconds since the first open on this timeline's clock."""
        if self.pace == "virtual":
            return self._virtual_now_s
        opened = self._opened_at if self._opened_at is not None else time.monotonic()
        return time.monotonic() - opened

    def wait(self, seconds: float, *, idle: bool = False) -> None:
        """Let ``seconds`` pass (``inf``: until unplugged); the caller checks the cable after."""
        if self.pace == "virtual":
            if seconds != float("inf"):
                self._virtual_now_s += seconds
            if idle:
                self._unplug_now.wait(min(seconds, _IDLE_REAL_WAIT_S))
            return
        # A real wait that an unplug cuts short, as a pulled cable ends a pending transfer.
        self._unplug_now.wait(None if seconds == float("inf") else seconds)
