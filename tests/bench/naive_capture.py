"""The obvious capture rule, as a baseline for the capture benchmark.

Tare on the empty readings just before a placement; after a placement, capture as soon as every
channel's last N readings lie within +/-1 d of their mean, N spanning 0.4 s (OIML R 76-1 4.4.2
via domain.md: +/-1 d for at least 0.4 s); report their average; hold until the supports are
empty again. No noise model, no zero tracking.
"""

from __future__ import annotations

import math
from collections import deque
from collections.abc import Sequence
from dataclasses import dataclass

from tests.bench.placement_gate import PlacementGate


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
        self.gate = PlacementGate(channels, rate_hz, division_g, tare_s=tare_s,
                                  placement_threshold_g=placement_threshold_g,
                                  empty_threshold_g=empty_threshold_g)  # fmt: skip
        self.last: dict[str, deque[float]] = {c: deque(maxlen=self.n) for c in channels}
        self.holding = False

    def on_sample(self, channel: str, t_s: float, value_g: float) -> NaiveCapture | None:
        event = self.gate.on_sample(channel, value_g)
        if event == "touched":
            for buf in self.last.values():
                buf.clear()
        elif event == "lifted":
            self.holding = False
        if event in ("empty", "lifted") or self.holding:
            return None
        self.last[channel].append(value_g)
        means: dict[str, float] = {}
        for c, buf in self.last.items():
            if len(buf) < self.n:
                return None
            m = math.fsum(buf) / len(buf)
            if any(abs(v - m) > self.d for v in buf):
                return None
            means[c] = self.gate.net_g(c, m)
        self.holding = True
        return NaiveCapture(t_s, means)
