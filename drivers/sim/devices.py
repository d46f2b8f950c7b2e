"""Simulated devices: what each one says, and when, on the bench's own clock.

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
from collections import deque
from collections.abc import Sequence
from dataclasses import dataclass

from heft.drivers.sim import encoders
from heft.drivers.sim.definitions import (
    AnyDefinition,
    BeamDef,
    PollBalanceDef,
    RegexLineDef,
    ScannerDef,
    StreamBalanceDef,
)
from heft.drivers.sim.physics import BenchTimeline, SensorNoise
from heft.drivers.units import g_to_mass, mass_to_g

Frame = tuple[float, bytes]  # (due time on the bench clock in seconds, bytes on the wire)

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


class BeamDevice(SimDevice):
    """Section e: load cells on an ADC; HELLO, samples with seq and device time, commands."""

    definition: BeamDef

    def __init__(self, definition: BeamDef, timeline: BenchTimeline, *, seed: int) -> None:
        super().__init__(definition, seed=seed)
        for ch in definition.channels:
            if ch.bench_channel not in timeline.channels:
                raise ValueError(
                    f"device {definition.name}: bench_channel {ch.bench_channel} not in the "
                    f"bench's channels {timeline.channels}"
                )
        self.timeline = timeline
        self.seq = 0
        self._boot_s = 0.0
        self._noise = [
            SensorNoise(
                f"{seed}:{definition.name}:{ch.bench_channel}",
                definition.noise_g,
                definition.drift_g_per_s,
            )
            for ch in definition.channels
        ]
        self.adc_min, self.adc_max = encoders.adc_limits(definition.adc_bits)

    def hello(self) -> bytes:
        d = self.definition
        return encoders.beam_hello(
            firmware=d.firmware,
            channels=len(d.channels),
            rate_hz=round(self.rate_hz),
            bits=d.adc_bits,
            serial=d.serial_number,
        )

    def boot(self, t_s: float) -> None:
        """Power-up: silence for ``boot_time_s``, the banner, HELLO, then samples."""
        self._queue.clear()
        self._sampling = False
        self._boot_s = t_s
        self.seq = 0
        ready = t_s + self.definition.boot_time_s
        for i, text in enumerate(self.definition.boot_banner):
            self._later(ready + 0.002 * i, text.encode("ascii", errors="replace") + b"\r\n")
        self._later(ready + 0.002 * len(self.definition.boot_banner), self.hello())
        self._start_sampling(ready + 0.002 * len(self.definition.boot_banner) + self.period_s)

    def device_time_ms(self, t_s: float) -> int:
        d = self.definition
        elapsed_ms = (t_s - self._boot_s) * 1000.0 * (1.0 + d.clock_ppm * 1e-6)
        return (d.clock_start_ms + math.floor(elapsed_ms)) % 2**32

    def counts(self, t_s: float) -> list[int]:
        forces = self.timeline.forces_at(t_s)
        out: list[int] = []
        for ch, noise in zip(self.definition.channels, self._noise, strict=True):
            sensed_g = forces[ch.bench_channel] + noise.sample_g(t_s)
            c = round(ch.offset_counts + ch.counts_per_g * sensed_g)
            out.append(min(self.adc_max, max(self.adc_min, c)))  # the ADC saturates
        return out

    def _sample(self, t_s: float) -> list[bytes]:
        frame = encoders.beam_sample(self.seq, self.device_time_ms(t_s), self.counts(t_s))
        self.seq = (self.seq + 1) % 65536
        return [frame]

    def _command(self, text: str, t_s: float) -> list[bytes]:
        parts = text.split()
        if not parts:
            return []
        cmd = parts[0].upper()
        if cmd == "!ID" and len(parts) == 1:
            return [encoders.beam_ok("ID"), self.hello()]
        if cmd == "!RATE":
            allowed = self.definition.allowed_rates_hz
            if len(parts) != 2 or not parts[1].isdigit() or int(parts[1]) not in allowed:
                rates = " or ".join(str(r) for r in allowed)
                return [encoders.beam_err(f"RATE expects {rates}")]
            self.rate_hz = float(int(parts[1]))
            self._start_sampling(t_s + self.period_s)
            return [encoders.beam_ok(f"RATE {int(parts[1])}"), self.hello()]
        if cmd == "!REBOOT" and len(parts) == 1:
            self.boot(t_s)
            return [encoders.beam_ok("REBOOT")]
        return [encoders.beam_err(f"unknown command {text[:32]}")]


class ScannerDevice(SimDevice):
    """Section f: one line per scan; by default it scans each placed club shortly before."""

    definition: ScannerDef

    def __init__(
        self,
        definition: ScannerDef,
        timeline: BenchTimeline | None = None,
        *,
        seed: int = 0,
        scans: Sequence[tuple[float, str]] | None = None,
    ) -> None:
        super().__init__(definition, seed=seed)
        if scans is None:
            placements = timeline.placements if timeline is not None else ()
            scans = [
                (max(0.0, p.t_on_s - definition.scan_lead_s), p.club.club_id)
                for p in placements
                if p.club.club_id
            ]
        self.scans = sorted(scans)
        self._next_scan = 0

    def boot(self, t_s: float) -> None:
        super().boot(t_s)
        # A scanner plugged in late does not replay scans that happened before it.
        while self._next_scan < len(self.scans) and self.scans[self._next_scan][0] < t_s:
            self._next_scan += 1

    def _sample(self, t_s: float) -> list[bytes]:
        out: list[bytes] = []
        while self._next_scan < len(self.scans) and self.scans[self._next_scan][0] <= t_s:
            club_id = self.scans[self._next_scan][1]
            d = self.definition
            out.append(
                encoders.scan_line(
                    club_id,
                    prefix=d.prefix,
                    suffix=d.suffix,
                    terminator=d.terminator.encode("ascii"),
                )
            )
            self._next_scan += 1
        return out

    def _command(self, text: str, t_s: float) -> list[bytes]:
        return []  # a scanner in line mode does not listen


def make_device(
    definition: AnyDefinition,
    timeline: BenchTimeline,
    *,
    seed: int = 0,
    scans: Sequence[tuple[float, str]] | None = None,
) -> SimDevice:
    """The simulated device for a definition, reading forces from ``timeline``."""
    if isinstance(definition, PollBalanceDef):
        return PollBalance(definition, timeline, seed=seed)
    if isinstance(definition, StreamBalanceDef):
        return StreamBalance(definition, timeline, seed=seed)
    if isinstance(definition, RegexLineDef):
        return RegexLineScale(definition, timeline, seed=seed)
    if isinstance(definition, BeamDef):
        return BeamDevice(definition, timeline, seed=seed)
    return ScannerDevice(definition, timeline, seed=seed, scans=scans)
