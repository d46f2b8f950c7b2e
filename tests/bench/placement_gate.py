"""Placement detection shared by the benchmark's baseline rules (not the engine's).

Tare on the median of the empty readings of the last ``tare_s`` (the median, so the first
readings of a touch do not bias it); a placement when the tared total passes
``placement_threshold_g``; empty again below ``empty_threshold_g``.
"""

from __future__ import annotations

import math
import statistics
from collections import deque
from collections.abc import Sequence
from typing import Literal

GateEvent = Literal["touched", "lifted", "loaded", "empty"]


class PlacementGate:
    def __init__(
        self,
        channels: Sequence[str],
        rate_hz: float,
        division_g: float,
        *,
        placement_threshold_g: float = 20.0,
        empty_threshold_g: float = 5.0,
        tare_s: float = 1.0,
    ) -> None:
        self.channels = tuple(channels)
        self.placed = placement_threshold_g
        self.empty = empty_threshold_g
        n_tare = max(1, round(tare_s * rate_hz))
        self.tare_buf: dict[str, deque[float]] = {c: deque(maxlen=n_tare) for c in channels}
        self.tare: dict[str, float] = dict.fromkeys(channels, 0.0)
        # per-reading noise seen while empty; never below the display's rounding (GUM 4.3.7)
        self.floor_g = division_g / math.sqrt(12)
        self.noise: dict[str, float] = dict.fromkeys(channels, self.floor_g)
        self.latest: dict[str, float] = dict.fromkeys(channels, 0.0)
        self.loaded = False

    def on_sample(self, channel: str, value_g: float) -> GateEvent:
        """``touched`` / ``lifted`` on a change, else ``loaded`` or ``empty``."""
        self.latest[channel] = value_g
        total = sum(self.latest[c] - self.tare[c] for c in self.channels)
        if not self.loaded:
            if total <= self.placed:
                self.tare_buf[channel].append(value_g)
                return "empty"
            self.loaded = True
            for c, buf in self.tare_buf.items():
                if buf:
                    self.tare[c] = statistics.median(buf)
                if len(buf) >= 2:
                    self.noise[c] = max(statistics.stdev(buf), self.floor_g)
            return "touched"
        if total < self.empty:
            self.loaded = False
            for buf in self.tare_buf.values():
                buf.clear()
            return "lifted"
        return "loaded"

    def net_g(self, channel: str, value_g: float) -> float:
        return value_g - self.tare[channel]
