"""Simulated gram scales (docs/protocols.md a-c): zero, tare, display step, own stability flag.

``PollBalance`` answers the poll command set (a), ``StreamBalance`` streams (b) and
``RegexLineScale`` prints a configured line (c); all three share ``ScaleDevice``'s weighing.
"""

from __future__ import annotations

import math
from collections import deque
from dataclasses import dataclass

from heft.drivers.sim import encoders
from heft.drivers.sim.clockwork import SimDevice
from heft.drivers.sim.definitions import PollBalanceDef, RegexLineDef, StreamBalanceDef
from heft.drivers.sim.physics import BenchTimeline, SensorNoise
from heft.drivers.units import g_to_mass, mass_to_g

ZERO_RANGE_FRACTION = 0.04  # zero setting within 4 % of capacity (OIML R 76-1 4.5.1)
OVERLOAD_STEPS = 9  # nothing shown above capacity + 9 d (OIML R 76-1 4.2.3)


def nice_step(step: float) -> float:
    """Round a display step to 1, 2 or 5 times a power of ten (as displays do)."""
    exponent = math.floor(math.log10(step))
    base = 10.0**exponent
    for m in (1.0, 2.0, 5.0, 10.0):
        if step <= m * base * 1.0001:
            return round(m * base, 12)
    return round(10 * base, 12)


@dataclass(frozen=True, slots=True)
class ScaleState:
    """One sample of a gram scale as its firmware sees it."""

    t_s: float
    gross_g: float  # after zero, before tare
    shown: float  # net, in the display unit, rounded to the display step
    stable: bool
    overload: bool
    underload: bool


ScaleDef = PollBalanceDef | StreamBalanceDef | RegexLineDef


class ScaleDevice(SimDevice):
    """A gram scale under one bench channel: zero, tare, display step, own stability flag."""

    definition: ScaleDef

    def __init__(self, definition: ScaleDef, timeline: BenchTimeline, *, seed: int) -> None:
        super().__init__(definition, seed=seed)
        if definition.bench_channel not in timeline.channels:
            raise ValueError(
                f"device {definition.name}: bench_channel {definition.bench_channel} not in "
                f"the bench's channels {timeline.channels}"
            )
        self.timeline = timeline
        self.unit = definition.unit
        self.step = definition.display_step
        self.zero_offset_g = 0.0
        self.tare_g = 0.0
        self._noise = SensorNoise(
            f"{seed}:{definition.name}:{definition.bench_channel}",
            definition.noise_g,
            definition.drift_g_per_s,
        )
        self._window: deque[tuple[float, float]] = deque()
        self.last: ScaleState | None = None

    @property
    def step_g(self) -> float:
        return mass_to_g(self.step, self.unit)

    @property
    def decimals(self) -> int:
        return encoders.decimals_for_step(self.step)

    def set_unit(self, unit: str) -> None:
        """Switch the display unit (the step follows, rounded to 1-2-5)."""
        step_g = self.step_g
        self.unit = unit
        self.step = nice_step(g_to_mass(step_g, unit))
        self._window.clear()

    def shown_value(self, value_g: float) -> float:
        """Grams to the display: the current unit, rounded to the display step."""
        value = g_to_mass(value_g, self.unit)
        return round(round(value / self.step) * self.step, self.decimals)

    def measure(self, t_s: float) -> ScaleState:
        force = self.timeline.forces_at(t_s)[self.definition.bench_channel]
        sensed_g = force + self._noise.sample_g(t_s)
        gross = sensed_g - self.zero_offset_g
        shown = self.shown_value(gross - self.tare_g)
        self._window.append((t_s, shown))
        window_s = self.definition.stable_window_s
        while self._window and self._window[0][0] < t_s - window_s - 1e-9:
            self._window.popleft()
        values = [v for _, v in self._window]
        full = t_s - self._window[0][0] >= window_s - self.period_s - 1e-9
        stable = full and max(values) - min(values) <= self.step * 1.0001
        cap = self.definition.capacity_g
        state = ScaleState(
            t_s=t_s,
            gross_g=gross,
            shown=shown,
            stable=stable,
            overload=gross > cap + OVERLOAD_STEPS * self.step_g,
            underload=gross < -ZERO_RANGE_FRACTION * cap - OVERLOAD_STEPS * self.step_g,
        )
        self.last = state
        return state

    def try_zero(self) -> str:
        """Zero on the current load: ``A`` done, ``I`` not stable, ``+``/``-`` out of range."""
        s = self.last
        if s is None or not s.stable:
            return "I"
        candidate = s.gross_g + self.zero_offset_g
        limit = ZERO_RANGE_FRACTION * self.definition.capacity_g
        if candidate > limit:
            return "+"
        if candidate < -limit:
            return "-"
        self.zero_offset_g = candidate
        self.tare_g = 0.0
        self._window.clear()
        return "A"

    def try_tare(self) -> str:
        """Tare the current load: ``S`` done, ``I`` not stable, ``+``/``-`` out of range."""
        s = self.last
        if s is None or not s.stable:
            return "I"
        if s.overload or s.gross_g > self.definition.capacity_g:
            return "+"
        if s.gross_g < -self.step_g:
            return "-"
        self.tare_g = s.gross_g
        self._window.clear()
        return "S"


class PollBalance(ScaleDevice):
    """Section a: answers S, SI, SIR, Z, T, @; ``S`` waits for stability up to a timeout."""

    definition: PollBalanceDef

    def __init__(self, definition: PollBalanceDef, timeline: BenchTimeline, *, seed: int) -> None:
        super().__init__(definition, timeline, seed=seed)
        self.continuous = False
        self._pending_since: float | None = None

    def _weight(self, s: ScaleState, cmd: str = "S") -> bytes:
        if s.overload:
            return encoders.poll_status(cmd, "+")
        if s.underload:
            return encoders.poll_status(cmd, "-")
        return encoders.poll_weight(
            s.shown, self.unit, stable=s.stable, decimals=self.decimals, cmd=cmd
        )

    def _sample(self, t_s: float) -> list[bytes]:
        s = self.measure(t_s)
        out: list[bytes] = []
        if self.continuous:
            out.append(self._weight(s))
        if self._pending_since is not None:
            if s.stable or s.overload or s.underload:
                out.append(self._weight(s))
                self._pending_since = None
            elif t_s - self._pending_since >= self.definition.stable_timeout_s:
                out.append(encoders.poll_status("S", "I"))
                self._pending_since = None
        return out

    def _command(self, text: str, t_s: float) -> list[bytes]:
        cmd = text.upper()
        if cmd != "SIR":
            self.continuous = False
        if cmd != "S":
            self._pending_since = None
        s = self.last
        if cmd == "S":
            if s is not None and (s.stable or s.overload or s.underload):
                return [self._weight(s)]
            self._pending_since = t_s
            return []
        if cmd == "SI":
            return [self._weight(s)] if s is not None else [encoders.poll_status("S", "I")]
        if cmd == "SIR":
            self.continuous = True
            return []
        if cmd == "Z":
            return [encoders.poll_status("Z", self.try_zero())]
        if cmd == "T":
            result = self.try_tare()
            if result == "S":
                return [
                    encoders.poll_weight(
                        self.shown_value(self.tare_g),
                        self.unit,
                        stable=True,
                        decimals=self.decimals,
                        cmd="T",
                    )
                ]
            return [encoders.poll_status("T", result)]
        if cmd == "@":
            return [encoders.poll_reset(self.definition.serial_number)]
        return [encoders.poll_error("ES")]


class StreamBalance(ScaleDevice):
    """Section b: a line per sample (or per ``R``); ``Z`` and ``T`` act silently."""

    definition: StreamBalanceDef

    def _line(self, s: ScaleState) -> bytes:
        return encoders.stream_line(
            s.shown,
            self.unit,
            stable=s.stable,
            net=self.tare_g != 0.0,
            decimals=self.decimals,
            overload=s.overload,
        )

    def _sample(self, t_s: float) -> list[bytes]:
        s = self.measure(t_s)
        return [self._line(s)] if self.definition.streaming else []

    def _command(self, text: str, t_s: float) -> list[bytes]:
        cmd = text.upper()
        if cmd == "Z":
            self.try_zero()
        elif cmd == "T":
            self.try_tare()
        elif cmd == "R" and self.last is not None:
            return [self._line(self.last)]
        return []


class RegexLineScale(ScaleDevice):
    """Section c: a line from a template, streamed or in answer to a poll string."""

    definition: RegexLineDef

    def _line(self, s: ScaleState) -> bytes:
        d = self.definition
        term = d.terminator.encode("ascii")
        if s.overload:
            return d.overload_line.encode("ascii") + term
        stable_text = d.stable_text if s.stable else d.motion_text
        return encoders.template_line(
            d.line_format, s.shown, self.unit, stable_text, decimals=self.decimals, terminator=term
        )

    def _sample(self, t_s: float) -> list[bytes]:
        s = self.measure(t_s)
        return [self._line(s)] if self.definition.poll is None else []

    def _command(self, text: str, t_s: float) -> list[bytes]:
        poll = self.definition.poll
        if poll is not None and text == poll.strip() and self.last is not None:
            return [self._line(self.last)]
        return []
