"""The obvious capture rule, as a baseline for the capture benchmark.

Tare on the empty readings just before a placement; after a placement, capture as soon as every
channel's last N readings lie within +/-1 d of their mean, N spanning 0.4 s (OIML R 76-1 4.4.2
via domain.md: +/-1 d for at least 0.4 s); report their average; hold until the supports are
empty again. No noise model, no zero tracking.
"""

from __future__ import annotations

import math
import statistics
from collections import deque
from collections.abc import Sequence
from dataclasses import dataclass


@dataclass(frozen=True)
class NaiveCapture:
    t_s: float
    means_g: dict[str, float]


class NaiveRule:
    def __init__(
        self,
        channels: Sequence[str],
        rate_hz: float,
        division_g: float,
        *,
        placement_threshold_g: float = 20.0,
        empty_threshold_g: float = 5.0,
        stable_s: float = 0.4,
        tare_s: float = 1.0,
    ) -> None:
        self.n = round(stable_s * rate_hz) + 1  # N readings spanning stable_s
        self.d = division_g
        self.placed = placement_threshold_g
        self.empty = empty_threshold_g
        n_tare = max(1, round(tare_s * rate_hz))
        self.last: dict[str, deque[float]] = {c: deque(maxlen=self.n) for c in channels}
        self.tare_buf: dict[str, deque[float]] = {c: deque(maxlen=n_tare) for c in channels}
        self.tare: dict[str, float] = dict.fromkeys(channels, 0.0)
        self.latest: dict[str, float] = dict.fromkeys(channels, 0.0)
        self.state = "empty"  # empty | settling | holding

    def on_sample(self, channel: str, t_s: float, value_g: float) -> NaiveCapture | None:
        self.latest[channel] = value_g
        total = sum(self.latest[c] - self.tare[c] for c in self.latest)
        if self.state == "empty":
            if total > self.placed:
                self.state = "settling"
                for c, buf in self.tare_buf.items():
                    if buf:  # median: the first readings of the touch must not bias the tare
                        self.tare[c] = statistics.median(buf)
                    self.last[c].clear()
                self.last[channel].append(value_g)
            else:
                self.tare_buf[channel].append(value_g)
            return None
        if total < self.empty:
            self.state = "empty"
            for buf in self.tare_buf.values():
                buf.clear()
            return None
        if self.state == "holding":
            return None
        self.last[channel].append(value_g)
        means: dict[str, float] = {}
        for c, buf in self.last.items():
            if len(buf) < self.n:
                return None
            m = math.fsum(buf) / len(buf)
            if any(abs(v - m) > self.d for v in buf):
                return None
            means[c] = m - self.tare[c]
        self.state = "holding"
        return NaiveCapture(t_s, means)
