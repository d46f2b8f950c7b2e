"""Seeded corpus of simulated placements for the capture benchmark, with ground truth.

The mechanics (ramp on touch, damped ringing, bumps, lift-off) come from
``drivers.sim.physics.placement_force_g``; this module adds the devices that look at it:

* an HX711 channel integrates the force over its conversion period (10 or 80 samples/s),
  adds Gaussian noise and a slow zero drift, and reports grams at 0.01 g resolution;
* a precision balance samples at 50/s inside, averages the last 0.4 s (its own filter), reports
  about 10 readings/s rounded to its 0.01 g step, and flags STABLE while its last 0.5 s of
  readings span at most one step (otherwise MOTION).

These device models are invented for the benchmark (typical shapes, figures from memory), not
copies of any product. Each rig runs as one continuous session: placements separated by empty
periods, fed through one engine, as on a bench.

Ground truth per placement: the static force per channel (from the club and the support
positions) and two limits, both taken from the noise-free device outputs and both held until the
next bump or lift-off:

* the *result* limit, the one the operator cares about: the earliest time after which the result
  computed from the latest output of every channel stays within the resolution the station needs
  (swing weight within 0.1 point, total weight within 0.5 g, so it rounds to the whole gram a
  spec's weight range is written in; both are parameters);
* the *display* limit: the earliest time every channel's output is within +/-1 d of its static
  force and stays there for the samples needed to average the noise down to the required
  resolution (what a display-stability rule, as legal-for-trade weighing requires, waits for).

Some placements are lifted early, after the result is known but before the display settles, as
an operator in a hurry does; a placement lifted before even its result is known has no result
limit and is not expected to be captured.
"""

from __future__ import annotations

import functools
import itertools
import math
import random
from collections import deque
from collections.abc import Callable, Iterator
from dataclasses import dataclass, field

from heft.daemon.physics.statics import two_support_statics
from heft.daemon.physics.swingweight import points_from_moment_g_in
from heft.drivers.reading import Flag
from heft.drivers.sim.physics import Club, Dynamics, Placement, TwoSupports, placement_force_g

SUPPORT_A_IN = 4.0  # butt-side support, inches from the butt stop
SUPPORT_B_IN = 36.0  # head-side support
CHANNELS = ("beam/0", "beam/1")
RESOLUTION_D = 0.5  # required standard error of a capture, in d (the engine's default too)
SW_RESOLUTION_POINTS = 0.1  # the result limit: swing weight known to a tenth of a point
WEIGHT_RESOLUTION_G = 0.5  # ... and total weight rounding to the right whole gram


@dataclass(frozen=True)
class RigSpec:
    """One kind of bench: device model, rates, noise, and the range of its mechanics."""

    name: str
    preset: str  # CaptureParams preset the engine runs with
    device: str  # 'hx711' | 'balance'
    rate_hz: float
    division_g: float
    noise_g: float  # per-sample noise (HX711) or raw internal noise (balance), rms
    drift_g_per_s: float
    freq_hz: tuple[float, float]
    zeta: tuple[float, float]
    overshoot: tuple[float, float]
    bumps_per_placement: tuple[int, int] = (0, 0)
    bump_g: tuple[float, float] = (0.0, 0.0)
    hold_bump_chance: float = 0.15  # a knock while the club is held (tests double captures)
    early_lift_chance: float = 0.12  # lifted after the ringing has mostly died, before it settles


# Noise figures (per sample, rms): 0.05 g at 10/s and 0.15 g at 80/s are what DIY HX711 rigs
# with 1 kg bar cells commonly show (from memory); the quiet 80/s rig is nearer the HX711 data
# sheet's input noise (about 90 nV rms at 80 SPS, from memory: about 0.02 g on a 1 kg, 1 mV/V
# cell at 4.3 V excitation). The balance's 0.02 g is its raw internal noise before its filter.
# Drift figures: a load cell's zero moves with temperature, typically about 0.02 % of its
# capacity per 10 K (from memory of bar-cell data sheets): 0.2 g per 10 K on a 1 kg cell. The
# corpus drifts far faster (0.7 g/h, noisy bench 1.8 g/h) so that zero tracking has work to do.
RIGS: tuple[RigSpec, ...] = (
    RigSpec("hx711 10/s", "hx711_10hz", "hx711", 10.0, 0.1, 0.05, 0.0002,
            (2.5, 4.5), (0.10, 0.25), (0.10, 0.30)),
    RigSpec("hx711 80/s", "hx711_80hz", "hx711", 80.0, 0.1, 0.15, 0.0002,
            (2.5, 4.5), (0.10, 0.25), (0.10, 0.30)),
    RigSpec("hx711 80/s quiet", "hx711_80hz", "hx711", 80.0, 0.1, 0.03, 0.0002,
            (2.5, 4.5), (0.10, 0.25), (0.10, 0.30)),
    RigSpec("balance 10/s", "precision_balance", "balance", 10.0, 0.01, 0.02, 0.0,
            (2.5, 4.5), (0.10, 0.25), (0.05, 0.20)),
    RigSpec("noisy+bumps 80/s", "hx711_80hz", "hx711", 80.0, 0.1, 0.25, 0.0005,
            (2.5, 4.5), (0.10, 0.25), (0.10, 0.30), (0, 2), (3.0, 30.0), 0.3),
    RigSpec("light damping 10/s", "hx711_10hz", "hx711", 10.0, 0.1, 0.05, 0.0002,
            (2.0, 3.5), (0.04, 0.08), (0.10, 0.25)),
    RigSpec("heavy damping 80/s", "hx711_80hz", "hx711", 80.0, 0.1, 0.15, 0.0002,
            (3.0, 6.0), (0.40, 0.70), (0.05, 0.20)),
)  # fmt: skip


@dataclass(frozen=True)
class Truth:
    """What really happened in one placement."""

    index: int
    t_on_s: float
    t_off_s: float
    club: Club
    static_g: dict[str, float]
    t_result_s: float | None  # result known to resolution for good; None: lifted before that
    t_display_s: float | None  # display settled +/-1 d (and averaged); None: lifted before that


Sample = tuple[float, str, float, Flag]  # (arrival time, channel, grams, device flags)


@dataclass
class Session:
    rig: RigSpec
    truths: list[Truth]
    samples: list[Sample] = field(default_factory=list)
    sample_noise_g: float = 0.0  # per-sample noise of the output, rms (for the limit)


@dataclass(frozen=True)
class _Mech:
    placement: Placement
    dynamics: Dynamics
    static_g: dict[str, float]


class _Mechanics:
    """Noise-free force on each channel over a session of placements."""

    def __init__(self, mechs: list[_Mech]) -> None:
        self.mechs = mechs
        self._starts = [m.placement.t_on_s for m in mechs]

    def force_g(self, channel: str, t_s: float) -> float:
        i = _bisect_right(self._starts, t_s) - 1
        if i < 0:
            return 0.0
        m = self.mechs[i]
        static = m.static_g[channel]
        share = static / sum(m.static_g.values())
        return placement_force_g(m.placement, static, m.dynamics, t_s, share)


def _bisect_right(a: list[float], x: float) -> int:
    lo, hi = 0, len(a)
    while lo < hi:
        mid = (lo + hi) // 2
        if x < a[mid]:
            hi = mid
        else:
            lo = mid + 1
    return lo


# --- devices -------------------------------------------------------------------------------


class _Hx711:
    """Integrates over its conversion period; 0.01 g output resolution; noise and drift."""

    def __init__(self, spec: RigSpec, rng: random.Random | None) -> None:
        self.period_s = 1.0 / spec.rate_hz
        self.sub = 5 if spec.rate_hz <= 20 else 2
        self.noise_g = spec.noise_g
        self.drift = spec.drift_g_per_s
        self.rng = rng

    def output(self, force: Callable[[float], float], t_s: float) -> tuple[float, Flag]:
        h = self.period_s / self.sub
        v = sum(force(t_s - (k + 0.5) * h) for k in range(self.sub)) / self.sub
        if self.rng is None:
            return v, Flag.NONE
        v += self.rng.gauss(0.0, self.noise_g) + self.drift * t_s
        return round(v, 2), Flag.NONE


class _Balance:
    """50/s inside, 0.4 s moving average, output rounded to d, own STABLE/MOTION flag."""

    INNER_HZ = 50.0
    FILTER_S = 0.4
    STABLE_S = 0.5

    def __init__(self, spec: RigSpec, rng: random.Random | None) -> None:
        self.d = spec.division_g
        self.noise_g = spec.noise_g
        self.rng = rng
        self.inner: deque[tuple[float, float]] = deque()
        self.shown: deque[tuple[float, float]] = deque()
        self.next_inner_s: float | None = None

    def output(self, force: Callable[[float], float], t_s: float) -> tuple[float, Flag]:
        step = 1.0 / self.INNER_HZ
        if self.next_inner_s is None:
            self.next_inner_s = t_s - self.FILTER_S
        while self.next_inner_s <= t_s:
            tt = self.next_inner_s
            noise = self.rng.gauss(0.0, self.noise_g) if self.rng is not None else 0.0
            self.inner.append((tt, force(tt) + noise))
            self.next_inner_s += step
        while self.inner and self.inner[0][0] <= t_s - self.FILTER_S:
            self.inner.popleft()
        v = sum(x for _, x in self.inner) / len(self.inner)
        if self.rng is None:
            return v, Flag.NONE
        shown = round(round(v / self.d) * self.d, 6)
        self.shown.append((t_s, shown))
        while self.shown and self.shown[0][0] < t_s - self.STABLE_S - 1e-9:
            self.shown.popleft()
        values = [x for _, x in self.shown]
        full = t_s - self.shown[0][0] >= self.STABLE_S - 0.15
        stable = full and max(values) - min(values) <= self.d * 1.0001
        return shown, Flag.STABLE if stable else Flag.MOTION

    @property
    def output_noise_g(self) -> float:
        # averaging FILTER_S * INNER_HZ samples, then rounding to d (GUM: d/sqrt(12))
        return math.sqrt(self.noise_g**2 / (self.FILTER_S * self.INNER_HZ) + self.d**2 / 12)


# --- corpus --------------------------------------------------------------------------------


def _plan(spec: RigSpec, count: int, rng: random.Random) -> list[_Mech]:
    geometry = TwoSupports(SUPPORT_A_IN, SUPPORT_B_IN)
    mechs: list[_Mech] = []
    t = 3.0  # empty at the start: the engine learns the noise, the naive rule tares
    for k in range(count):
        club = Club(rng.uniform(290.0, 470.0), rng.uniform(31.0, 36.5), f"club-{k}")
        forces = geometry.static_forces_g(club)
        static = {CHANNELS[0]: forces[0], CHANNELS[1]: forces[1]}
        dyn = Dynamics(
            ramp_s=rng.uniform(0.03, 0.15),
            frequency_hz=rng.uniform(*spec.freq_hz),
            damping_ratio=rng.uniform(*spec.zeta),
            overshoot=rng.uniform(*spec.overshoot),
            lift_ramp_s=0.1,
        )
        # ringing below 0.2 d after this long (envelope of the largest channel)
        peak = dyn.overshoot * max(static.values())
        settle = dyn.ramp_s + math.log(max(peak / (0.2 * spec.division_g), 1.0)) / dyn.decay_per_s
        bumps: list[tuple[float, float]] = []
        for _ in range(rng.randint(*spec.bumps_per_placement)):
            tb = t + rng.uniform(0.3, 0.8 * settle + 0.5)
            bumps.append((tb, rng.choice((-1.0, 1.0)) * rng.uniform(*spec.bump_g)))
        last_disturbance = max([t + settle, *(b[0] + settle for b in bumps)])
        hold_s = rng.uniform(2.5, 4.0)
        t_off = last_disturbance + hold_s
        if rng.random() < spec.hold_bump_chance:  # knocked while held, after it settled
            amp_g = spec.bump_g if spec.bump_g[1] > 0 else (5.0, 15.0)
            bumps.append((last_disturbance + 0.5 * hold_s, rng.uniform(*amp_g)))
        if rng.random() < spec.early_lift_chance:  # lifted while the display still moves
            t_off = last_disturbance - rng.uniform(0.15, 0.6) * (settle - dyn.ramp_s)
            bumps = [b for b in bumps if b[0] < t_off - 0.1]
        mechs.append(_Mech(Placement(club, t, t_off, tuple(sorted(bumps))), dyn, static))
        t = t_off + rng.uniform(2.0, 3.5)
    return mechs


def _device(spec: RigSpec, rng: random.Random | None) -> _Hx711 | _Balance:
    return _Hx711(spec, rng) if spec.device == "hx711" else _Balance(spec, rng)


def _sample_times(spec: RigSpec, t_end_s: float, rng: random.Random) -> dict[str, list[float]]:
    """Each channel its own device clock: slightly different rate and phase, arrival jitter."""
    out: dict[str, list[float]] = {}
    for ch in CHANNELS:
        rate = spec.rate_hz * (1.0 + rng.uniform(-0.003, 0.003))
        phase = rng.uniform(0.0, 1.0 / rate)
        ts: list[float] = []
        k = 0
        while (t := phase + k / rate) < t_end_s:
            ts.append(t)
            k += 1
        out[ch] = ts
    return out


def _segments(p: Placement) -> Iterator[tuple[float, float]]:
    """The stretches between touch, each bump and lift-off: a limit must hold to the end of one."""
    return itertools.pairwise([p.t_on_s, *(b[0] for b in p.bumps if b[0] < p.t_off_s), p.t_off_s])


def result_of(forces_g: dict[str, float]) -> tuple[float, float]:
    """(total weight g, swing-weight points) from the two support forces (two-support statics)."""
    statics = two_support_statics(
        forces_g[CHANNELS[0]], SUPPORT_A_IN, forces_g[CHANNELS[1]], SUPPORT_B_IN
    )
    return statics.total_weight_g, points_from_moment_g_in(statics.moment_g_in)


def _result_limit_time(
    m: _Mech, spec: RigSpec, times: dict[str, list[float]], mech: _Mechanics
) -> float | None:
    """Earliest time after which the result from the latest noise-free output of every channel
    stays within the resolution, before the next bump or lift-off."""
    true_w_g, true_points = result_of(m.static_g)
    for seg_start, seg_end in _segments(m.placement):
        events: list[tuple[float, str, float]] = []
        for ch in CHANNELS:
            dev = _device(spec, None)
            for t in times[ch]:
                if seg_start - 1.0 <= t < seg_end:  # a second before: the device's own state
                    events.append((t, ch, dev.output(functools.partial(mech.force_g, ch), t)[0]))
        events.sort()
        latest: dict[str, float] = {}
        since: float | None = None
        for t, ch, v in events:
            latest[ch] = v
            if t < seg_start or len(latest) < len(CHANNELS) or sum(latest.values()) <= 0:
                continue
            w_g, points = result_of(latest)
            good = (abs(points - true_points) <= SW_RESOLUTION_POINTS
                    and abs(w_g - true_w_g) <= WEIGHT_RESOLUTION_G)  # fmt: skip
            if not good:
                since = None
            elif since is None:
                since = t
        if since is not None:
            return since
    return None


def _display_limit_time(
    m: _Mech, spec: RigSpec, times: dict[str, list[float]], mech: _Mechanics, n_req: int
) -> float | None:
    """Earliest time every channel's noise-free output is within +/-1 d and stays there for
    ``n_req`` samples, before the next bump or lift-off."""
    for seg_start, seg_end in _segments(m.placement):
        ends: list[float] = []
        for ch in CHANNELS:
            dev = _device(spec, None)
            ts = [t for t in times[ch] if seg_start - 1.0 <= t < seg_end]
            run: list[float] = []
            for t in ts:
                v, _ = dev.output(functools.partial(mech.force_g, ch), t)
                if t < seg_start:
                    continue
                if abs(v - m.static_g[ch]) <= spec.division_g:
                    run.append(t)
                else:
                    run = []
            if len(run) < n_req:
                break
            ends.append(run[n_req - 1])
        else:
            return max(ends)
    return None


def build_session(spec: RigSpec, count: int, seed: int) -> Session:
    """``count`` placements on one rig, sampled as its devices would: streams plus truth."""
    rng = random.Random(f"{seed}:{spec.name}")
    mechs = _plan(spec, count, rng)
    mech = _Mechanics(mechs)
    t_end = mechs[-1].placement.t_off_s + 3.0
    times = _sample_times(spec, t_end, rng)
    samples: list[Sample] = []
    probe = _device(spec, None)
    noise = (
        probe.output_noise_g
        if isinstance(probe, _Balance)
        else math.hypot(spec.noise_g, 0.01 / math.sqrt(12))
    )
    for ch in CHANNELS:
        dev = _device(spec, random.Random(f"{seed}:{spec.name}:{ch}"))
        for t in times[ch]:
            v, flags = dev.output(functools.partial(mech.force_g, ch), t)
            arrival = t + abs(rng.gauss(0.002, 0.001))  # host-side arrival jitter
            samples.append((arrival, ch, v, flags))
    samples.sort(key=lambda s: s[0])
    n_req = max(1, math.ceil((noise / (RESOLUTION_D * spec.division_g)) ** 2))
    truths = [
        Truth(
            index=k,
            t_on_s=m.placement.t_on_s,
            t_off_s=m.placement.t_off_s,
            club=m.placement.club,
            static_g=dict(m.static_g),
            t_result_s=_result_limit_time(m, spec, times, mech),
            t_display_s=_display_limit_time(m, spec, times, mech, n_req),
        )
        for k, m in enumerate(mechs)
    ]
    return Session(spec, truths, samples, noise)


def build_corpus(per_rig: int, seed: int, rigs: tuple[RigSpec, ...] = RIGS) -> Iterator[Session]:
    for spec in rigs:
        yield build_session(spec, per_rig, seed)
