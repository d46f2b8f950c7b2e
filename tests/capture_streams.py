"""Synthetic load streams for the capture engine tests (virtual time, seeded noise).

Each signal is a function of time; :func:`feed` samples it at a channel's rate, adds noise,
rounds to the display step and feeds the engine in time order.
"""

from __future__ import annotations

import math
import random
from collections.abc import Callable, Iterable

from heft.daemon.capture import Captured, CaptureEngine, CaptureOutput, Warning
from heft.daemon.capture_params import CaptureParams
from heft.drivers.reading import Flag

Signal = Callable[[float], float]
D_G = 0.1  # display step of the HX711 presets


def feed(
    engine: CaptureEngine,
    signals: dict[str, Signal],
    rates_hz: dict[str, float],
    t_end_s: float,
    *,
    noise_g: float = 0.03,
    seed: int = 1,
    flags: Callable[[str, float, float], Flag] | None = None,
    t_start_s: float = 0.0,
    offsets_s: dict[str, float] | None = None,
    round_to_d: bool = True,
) -> list[CaptureOutput]:
    """Sample each signal at its rate (noise added, rounded to d unless told otherwise: an HX711
    channel converted from counts keeps finer steps) and feed the engine in time order."""
    rng = random.Random(seed)
    events: list[tuple[float, str]] = []
    for ch, rate in rates_hz.items():
        k = 0
        off = (offsets_s or {}).get(ch, 0.0)
        while (t := t_start_s + off + k / rate) < t_end_s:
            events.append((t, ch))
            k += 1
    events.sort()
    out: list[CaptureOutput] = []
    for t, ch in events:
        v = signals[ch](t) + rng.gauss(0.0, noise_g)
        if round_to_d:
            v = round(v / D_G) * D_G
        f = flags(ch, t, v) if flags is not None else Flag.NONE
        out.extend(engine.on_sample(ch, t, v, f))
    return out


def captures(outs: Iterable[CaptureOutput]) -> list[Captured]:
    return [o for o in outs if isinstance(o, Captured)]


def warnings(outs: Iterable[CaptureOutput], kind: str) -> list[Warning]:
    return [o for o in outs if isinstance(o, Warning) and o.kind == kind]


def step(t_on: float, value: float, t_off: float = math.inf) -> Signal:
    return lambda t: value if t_on <= t < t_off else 0.0


def ringing(t_on: float, value: float, freq_hz: float, zeta: float, overshoot: float) -> Signal:
    """Textbook free response of an under-damped second-order system settling on ``value``."""
    wn = 2 * math.pi * freq_hz
    wd = wn * math.sqrt(1 - zeta**2)

    def f(t: float) -> float:
        if t < t_on:
            return 0.0
        tau = t - t_on
        return value + overshoot * value * math.exp(-zeta * wn * tau) * math.cos(wd * tau)

    return f


TWO = ["beam/0", "beam/1"]
RATES_10 = {"beam/0": 10.0, "beam/1": 10.0}


def engine_10hz(**overrides: object) -> CaptureEngine:
    return CaptureEngine(TWO, CaptureParams.preset("hx711_10hz", **overrides))
