"""A capture that stops when the result is known: the settling model's prediction (prototype).

Placement detection and tare as the fixed-window rule does them (``placement_gate``); then, every
``fit_every_s`` of readings, each channel's transient since the touch is fitted
(``heft.daemon.settling``) over two windows (from the touch, after the ramp, and the most recent
``recent_window_s``, which leaves a knock behind), and the result is computed from the predicted
equilibria through two-support statics with its uncertainty. Capture when, for two fits in a row,
the expanded uncertainty (k = ``coverage_k``) of swing weight and total weight is within the
resolution and the two agree within it. A fit counts only if its residual is near the channel's
noise (measured while empty) plus a small share of the oscillation's own size (time stamps are
host arrival times: a millisecond of jitter on a 60 g, 4 Hz ringing is a gram), so a model that
does not fit (a knock, a lift) does not capture.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

from heft.daemon.physics.swingweight import G_IN_PER_POINT
from heft.daemon.settling import DampedFit, fit_damped_oscillation
from tests.bench.placement_gate import PlacementGate


@dataclass(frozen=True)
class PredictedCapture:
    t_s: float
    means_g: dict[str, float]
    u_points: float
    u_weight_g: float


@dataclass(frozen=True)
class Resolution:
    points: float = 0.1
    weight_g: float = 0.5


class PredictRule:
    def __init__(
        self,
        channels: Sequence[str],
        positions_in: Sequence[float],
        division_g: float,
        *,
        resolution: Resolution = Resolution(),
        dead_time_s: float = 0.15,
        fit_every_s: float = 0.05,
        recent_window_s: float = 0.6,
        coverage_k: float = 3.0,
        residual_factor: float = 3.0,
        model_slack: float = 0.05,
        placement_threshold_g: float = 20.0,
        empty_threshold_g: float = 5.0,
        tare_s: float = 1.0,
        rate_hz: float = 80.0,
    ) -> None:
        self.channels = tuple(channels)
        self.arms_in = {c: x - 14.0 for c, x in zip(channels, positions_in, strict=True)}
        self.d = division_g
        self.res = resolution
        self.dead_time_s = dead_time_s
        self.fit_every_s = fit_every_s
        self.recent_window_s = recent_window_s
        self.k = coverage_k
        self.residual_factor = residual_factor
        self.model_slack = model_slack
        self.gate = PlacementGate(channels, rate_hz, division_g, tare_s=tare_s,
                                  placement_threshold_g=placement_threshold_g,
                                  empty_threshold_g=empty_threshold_g)  # fmt: skip
        self.samples: dict[str, list[tuple[float, float]]] = {c: [] for c in channels}
        self.holding = False
        self.t_touch = 0.0
        self.next_fit_s = 0.0
        self.previous: tuple[float, float] | None = None  # (weight g, points) of the last fit

    def _fit(self, channel: str, t_s: float) -> DampedFit | None:
        start = self.t_touch + self.dead_time_s
        data = [(t, v) for t, v in self.samples[channel] if t >= start]
        best: DampedFit | None = None
        for window_start in (start, t_s - self.recent_window_s):
            part = [(t, v) for t, v in data if t >= window_start]
            fit = fit_damped_oscillation([t for t, _ in part], [v for _, v in part])
            if fit is None:
                continue
            allowed = self.residual_factor * self.gate.noise[channel]
            if fit.residual_rms > allowed + self.model_slack * fit.oscillation_rms:
                continue
            if best is None or fit.equilibrium_u < best.equilibrium_u:
                best = fit
        return best

    def _decide(self, t_s: float) -> PredictedCapture | None:
        fits: dict[str, DampedFit] = {}
        for c in self.channels:
            fit = self._fit(c, t_s)
            if fit is None:
                self.previous = None
                return None
            fits[c] = fit
        weight_g = sum(f.equilibrium for f in fits.values())
        moment = sum(f.equilibrium * self.arms_in[c] for c, f in fits.items())
        u_weight = math.sqrt(sum(f.equilibrium_u**2 for f in fits.values()))
        u_points = math.sqrt(sum((f.equilibrium_u * self.arms_in[c]) ** 2
                                 for c, f in fits.items())) / G_IN_PER_POINT  # fmt: skip
        points = moment / G_IN_PER_POINT
        agrees = self.previous is not None and (
            abs(points - self.previous[1]) <= self.res.points
            and abs(weight_g - self.previous[0]) <= self.res.weight_g
        )
        self.previous = (weight_g, points)
        known = self.k * u_points <= self.res.points and self.k * u_weight <= self.res.weight_g
        if agrees and known:
            return PredictedCapture(t_s, {c: f.equilibrium for c, f in fits.items()},
                                    u_points, u_weight)  # fmt: skip
        return None

    def on_sample(self, channel: str, t_s: float, value_g: float) -> PredictedCapture | None:
        event = self.gate.on_sample(channel, value_g)
        if event == "touched":
            for c in self.channels:
                self.samples[c] = []
            self.t_touch = t_s
            self.next_fit_s = t_s + self.dead_time_s + self.fit_every_s
            self.previous = None
        elif event == "lifted":
            self.holding = False
        if event in ("empty", "lifted") or self.holding:
            return None
        self.samples[channel].append((t_s, self.gate.net_g(channel, value_g)))
        if t_s < self.next_fit_s:
            return None
        self.next_fit_s = t_s + self.fit_every_s
        captured = self._decide(t_s)
        self.holding = captured is not None
        return captured
