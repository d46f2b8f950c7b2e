"""A physical bench in pure code: forces a club puts on the supports, over time.

Nothing here does I/O or reads a clock: every function takes the time ``t_s`` (seconds on the
bench's own timeline) and everything random is drawn from a seeded ``random.Random``. The device
layer (``drivers.sim.devices``) adds rounding to the display step and the ADC counts.

Model of one placement of a club, per channel, with ``F`` its static force:

* a linear ramp over ``ramp_s`` as the club touches, from 0 up to ``F * (1 + overshoot)``;
* then a damped oscillation settling on ``F``:
  ``F + overshoot * F * exp(-zeta * omega_n * tau) * cos(omega_d * tau)`` where
  ``omega_n = 2 pi frequency_hz`` and ``omega_d = omega_n sqrt(1 - zeta^2)`` (textbook free
  response of an under-damped second-order system);
* a bump at ``t_b`` adds an impulse response ``bump_g * exp(-zeta omega_n s) sin(omega_d s)``
  (``s = t - t_b``), which restarts the ringing;
* lift-off ramps the force back to 0 over ``ramp_s``.

Sensor effects are separate from the mechanics: Gaussian noise per sample and a slow drift of the
zero. The ground truth a benchmark needs (the static forces and the time the noise-free
mechanical signal enters and stays within a tolerance) ignores both, since they are properties of
the sensor, not of the club.
"""

from __future__ import annotations

import bisect
import dataclasses
import itertools
import math
import random
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import Literal, Protocol

FULCRUM_IN = 14.0  # the Lorythmic fulcrum, inches from the butt (domain.md)

_OPEN_HORIZON_S = 30.0  # how far ground truth looks for a club not yet lifted


def moment_about_g_in(total_weight_g: float, balance_point_in: float, fulcrum_in: float) -> float:
    """Static moment about a fulcrum (g*in): weight times lever arm, textbook statics.

    The simulator keeps its own copy instead of importing the measuring core, so a wrong formula
    there is not mirrored in the bench that tests it.
    """
    return total_weight_g * (balance_point_in - fulcrum_in)


Channel = int
GeometryKind = Literal["two_support", "lever", "single"]


@dataclass(frozen=True, slots=True)
class Club:
    """A club as the bench sees it: its mass and where its centre of gravity is."""

    total_weight_g: float
    balance_point_in: float
    club_id: str = ""

    def __post_init__(self) -> None:
        if not self.total_weight_g > 0:
            raise ValueError(f"total_weight_g must be > 0, got {self.total_weight_g}")
        if not self.balance_point_in > 0:
            raise ValueError(f"balance_point_in must be > 0, got {self.balance_point_in}")

    @property
    def moment14_g_in(self) -> float:
        """Moment about the 14-inch fulcrum: W * (BP - 14) (domain.md)."""
        return moment_about_g_in(self.total_weight_g, self.balance_point_in, FULCRUM_IN)


class Geometry(Protocol):
    """Where the club rests: turns a club into a static force per channel."""

    @property
    def channels(self) -> tuple[Channel, ...]: ...

    def static_forces_g(self, club: Club) -> dict[Channel, float]: ...


@dataclass(frozen=True, slots=True)
class TwoSupports:
    """Two supports (cells or scales) at ``support_a_in`` < ``support_b_in`` from the butt stop.

    Channel 0 is support a (butt side), channel 1 support b (head side).
    """

    support_a_in: float = 4.0
    support_b_in: float = 36.0

    def __post_init__(self) -> None:
        if not self.support_b_in > self.support_a_in:
            raise ValueError(
                f"support_b_in ({self.support_b_in}) must be beyond support_a_in "
                f"({self.support_a_in})"
            )

    @property
    def channels(self) -> tuple[Channel, ...]:
        return (0, 1)

    def static_forces_g(self, club: Club) -> dict[Channel, float]:
        # Moments about support a: F_b * (x_b - x_a) = W * (BP - x_a); sum of forces: F_a + F_b = W.
        w = club.total_weight_g
        f_b = w * (club.balance_point_in - self.support_a_in) / (
            self.support_b_in - self.support_a_in
        )
        return {0: w - f_b, 1: f_b}


@dataclass(frozen=True, slots=True)
class FulcrumLever:
    """A beam pivoting at ``fulcrum_in`` with one cell at ``lever_arm_in`` from the pivot.

    The empty beam's own moment is taken as zeroed away, so the cell reads
    ``W * (BP - fulcrum) / r`` (channel 0).
    """

    lever_arm_in: float = 5.0
    fulcrum_in: float = FULCRUM_IN

    def __post_init__(self) -> None:
        if not self.lever_arm_in > 0:
            raise ValueError(f"lever_arm_in must be > 0, got {self.lever_arm_in}")

    @property
    def channels(self) -> tuple[Channel, ...]:
        return (0,)

    def static_forces_g(self, club: Club) -> dict[Channel, float]:
        moment = moment_about_g_in(club.total_weight_g, club.balance_point_in, self.fulcrum_in)
        return {0: moment / self.lever_arm_in}


@dataclass(frozen=True, slots=True)
class SingleScale:
    """The whole club on one gram scale: channel 0 reads W."""

    @property
    def channels(self) -> tuple[Channel, ...]:
        return (0,)

    def static_forces_g(self, club: Club) -> dict[Channel, float]:
        return {0: club.total_weight_g}


def make_geometry(kind: GeometryKind, **params: float) -> Geometry:
    """Build a geometry by its config name (``two_support``, ``lever``, ``single``)."""
    if kind == "two_support":
        return TwoSupports(**params)
    if kind == "lever":
        return FulcrumLever(**params)
    if kind == "single":
        return SingleScale()
    raise ValueError(f"unknown geometry {kind!r}; expected two_support, lever or single")


@dataclass(frozen=True, slots=True)
class Dynamics:
    """How the bench rings when a club lands (sensor noise and drift belong to the devices)."""

    ramp_s: float = 0.04  # club touching the supports
    frequency_hz: float = 4.0  # natural frequency of the loaded beam
    damping_ratio: float = 0.3  # zeta, 0 < zeta < 1 (under-damped)
    overshoot: float = 0.15  # first swing above the static force, as a fraction of it
    lift_ramp_s: float = 0.08

    def __post_init__(self) -> None:
        if not 0 < self.damping_ratio < 1:
            raise ValueError(f"damping_ratio must be in (0, 1), got {self.damping_ratio}")
        if not self.frequency_hz > 0:
            raise ValueError(f"frequency_hz must be > 0, got {self.frequency_hz}")
        if self.ramp_s < 0 or self.lift_ramp_s < 0:
            raise ValueError("ramp_s and lift_ramp_s must be >= 0")

    @property
    def omega_n(self) -> float:
        return 2.0 * math.pi * self.frequency_hz

    @property
    def omega_d(self) -> float:
        return self.omega_n * math.sqrt(1.0 - self.damping_ratio**2)

    @property
    def decay_per_s(self) -> float:
        """Envelope decay rate zeta * omega_n: amplitude ~ exp(-decay_per_s * t)."""
        return self.damping_ratio * self.omega_n


@dataclass(frozen=True, slots=True)
class Placement:
    """One club on the bench from ``t_on_s`` to ``t_off_s``, with bumps at given times."""

    club: Club
    t_on_s: float
    t_off_s: float
    bumps: tuple[tuple[float, float], ...] = ()  # (t_s, impulse amplitude in grams)

    def __post_init__(self) -> None:
        if not self.t_off_s > self.t_on_s:
            raise ValueError(f"t_off_s ({self.t_off_s}) must follow t_on_s ({self.t_on_s})")


@dataclass(frozen=True, slots=True)
class PlacementTruth:
    """What really happened in one placement, for benchmarks and tests."""

    club: Club
    t_on_s: float
    t_off_s: float
    static_forces_g: dict[Channel, float]
    settled_at_s: float | None  # None: never within tolerance before lift-off
    tolerance_g: float
    bumps: tuple[tuple[float, float], ...]


def placement_force_g(
    p: Placement, static_g: float, dyn: Dynamics, t_s: float, bump_share: float = 1.0
) -> float:
    """Noise-free force of one placement on one channel whose static force is ``static_g``.

    ``bump_share`` is the part of each bump this channel feels (its share of the club's weight).
    """
    if t_s < p.t_on_s:
        return 0.0
    peak = static_g * (1.0 + dyn.overshoot)
    tau = t_s - p.t_on_s
    if tau < dyn.ramp_s:
        on = peak * tau / dyn.ramp_s
    else:
        tau -= dyn.ramp_s
        on = static_g + dyn.overshoot * static_g * math.exp(-dyn.decay_per_s * tau) * math.cos(
            dyn.omega_d * tau
        )
    for t_b, amp_g in p.bumps:
        if t_s >= t_b:
            s = t_s - t_b
            on += bump_share * amp_g * math.exp(-dyn.decay_per_s * s) * math.sin(dyn.omega_d * s)
    if t_s < p.t_off_s:
        return on
    lift = t_s - p.t_off_s
    if lift >= dyn.lift_ramp_s:
        return 0.0
    return on * (1.0 - lift / dyn.lift_ramp_s)


@dataclass
class BenchTimeline:
    """A geometry with a script of placements: ``forces_at(t)`` per channel, noise-free.

    Placements must not overlap (one club at a time, as on a real bench). A script can also
    grow while a device reads it (``place``, ``lift``, ``bump``), e.g. a test laying a club on
    a simulated bench served on a pty: each change swaps one tuple, so a reader in another
    thread sees either the old script or the new one, never half of it.
    """

    geometry: Geometry
    placements: Sequence[Placement] = ()
    dynamics: Dynamics = field(default_factory=Dynamics)

    def __post_init__(self) -> None:
        ordered = sorted(self.placements, key=lambda p: p.t_on_s)
        for a, b in itertools.pairwise(ordered):
            self._check_gap(a, b)
        self._set(tuple(ordered))

    def _check_gap(self, a: Placement, b: Placement) -> None:
        if b.t_on_s < a.t_off_s + self.dynamics.lift_ramp_s:
            raise ValueError(
                f"placement at {b.t_on_s} s starts before the one at {a.t_on_s} s is lifted"
            )

    def _set(self, placements: tuple[Placement, ...]) -> None:
        statics = tuple(self.geometry.static_forces_g(p.club) for p in placements)
        self._state = (placements, [p.t_on_s for p in placements], statics)
        self.placements = placements

    @property
    def channels(self) -> tuple[Channel, ...]:
        return self.geometry.channels

    def place(
        self,
        club: Club,
        t_on_s: float,
        t_off_s: float = math.inf,
        bumps: tuple[tuple[float, float], ...] = (),
    ) -> Placement:
        """Lay ``club`` down at ``t_on_s`` (after the previous one is lifted); lift it at
        ``t_off_s`` or, by default, when ``lift`` is called."""
        new = Placement(club, t_on_s, t_off_s, bumps)
        placements = self._state[0]
        if placements:
            self._check_gap(placements[-1], new)
        self._set((*placements, new))
        return new

    def lift(self, t_off_s: float) -> None:
        """Lift the last club placed at ``t_off_s``."""
        placements = self._state[0]
        if not placements:
            raise ValueError("no club on the bench to lift")
        last = placements[-1]
        self._set((*placements[:-1], dataclasses.replace(last, t_off_s=t_off_s)))

    def bump(self, t_s: float, amplitude_g: float) -> None:
        """Knock the bench at ``t_s`` while the last club placed lies on it."""
        placements = self._state[0]
        if not placements or not placements[-1].t_on_s <= t_s < placements[-1].t_off_s:
            raise ValueError(f"no club on the bench at {t_s} s to bump")
        last = placements[-1]
        bumped = dataclasses.replace(last, bumps=(*last.bumps, (t_s, amplitude_g)))
        self._set((*placements[:-1], bumped))

    def _active(self, t_s: float) -> tuple[Placement, dict[Channel, float]] | None:
        placements, starts, statics = self._state
        i = bisect.bisect_right(starts, t_s) - 1
        if i >= 0 and t_s < placements[i].t_off_s + self.dynamics.lift_ramp_s:
            return placements[i], statics[i]
        return None

    def active_index(self, t_s: float) -> int | None:
        """Index of the placement whose force is non-zero at ``t_s`` (or None)."""
        placements, starts, _ = self._state
        i = bisect.bisect_right(starts, t_s) - 1
        if i >= 0 and t_s < placements[i].t_off_s + self.dynamics.lift_ramp_s:
            return i
        return None

    def forces_at(self, t_s: float) -> dict[Channel, float]:
        """Noise-free force on every channel at ``t_s``, grams."""
        active = self._active(t_s)
        if active is None:
            return dict.fromkeys(self.channels, 0.0)
        p, statics = active
        return {
            ch: placement_force_g(p, statics[ch], self.dynamics, t_s, _share(statics, ch))
            for ch in self.channels
        }

    def club_at(self, t_s: float) -> Club | None:
        active = self._active(t_s)
        return None if active is None else active[0].club

    def truth(self, tolerance_g: float, step_s: float = 0.0005) -> list[PlacementTruth]:
        """Ground truth per placement: static forces and the settle time at ``tolerance_g``.

        ``settled_at_s`` is the earliest time from which the noise-free force of every channel
        stays within ``tolerance_g`` of its static force until lift-off (for a club not yet
        lifted: for the next 30 s), found on a grid of ``step_s`` (so exact to ``step_s``).
        """
        placements, _, all_statics = self._state
        out: list[PlacementTruth] = []
        for p, statics in zip(placements, all_statics, strict=True):
            out.append(
                PlacementTruth(
                    club=p.club,
                    t_on_s=p.t_on_s,
                    t_off_s=p.t_off_s,
                    static_forces_g=dict(statics),
                    settled_at_s=settle_time_s(p, statics, self.dynamics, tolerance_g, step_s),
                    tolerance_g=tolerance_g,
                    bumps=p.bumps,
                )
            )
        return out


def settle_time_s(
    p: Placement,
    statics: Mapping[Channel, float],
    dyn: Dynamics,
    tolerance_g: float,
    step_s: float = 0.0005,
) -> float | None:
    """Earliest grid time after which every channel stays within tolerance until lift-off."""
    horizon_s = min(p.t_off_s, p.t_on_s + _OPEN_HORIZON_S) - p.t_on_s
    n = math.floor(horizon_s / step_s)
    last_bad = -1
    for k in range(n):
        t = p.t_on_s + k * step_s
        for ch, f in statics.items():
            if abs(placement_force_g(p, f, dyn, t, _share(statics, ch)) - f) > tolerance_g:
                last_bad = k
                break
    if last_bad >= n - 1:
        return None
    return p.t_on_s + (last_bad + 1) * step_s


def _share(statics: Mapping[Channel, float], ch: Channel) -> float:
    total = sum(statics.values())
    return statics[ch] / total if total else 1.0


class SensorNoise:
    """Gaussian noise and slow zero drift of one channel, from a seeded generator.

    Draws happen in call order, so the sequence is reproducible when samples are taken in order
    (both the real-time writer and the virtual-time recorder sample at fixed times).
    """

    def __init__(self, seed: int | str, noise_g: float, drift_g_per_s: float) -> None:
        # str seeds are hashed with SHA-512 by random.Random: stable across runs and processes.
        self._rng = random.Random(seed)
        self.noise_g = noise_g
        self.drift_g_per_s = drift_g_per_s

    def sample_g(self, t_s: float) -> float:
        """Noise plus drift to add to the force sampled at ``t_s``."""
        noise = self._rng.gauss(0.0, self.noise_g) if self.noise_g > 0 else 0.0
        return noise + self.drift_g_per_s * t_s


def cycle_placements(
    club: Club,
    *,
    period_s: float,
    on_s: float,
    count: int,
    start_s: float = 1.0,
    bump_every: int = 0,
    bump_g: float = 0.0,
    rng: random.Random | None = None,
) -> list[Placement]:
    """``count`` placements of the same club: placed at ``start + k * period``, lifted after
    ``on_s``. Every ``bump_every``-th placement (0 = never) gets a bump of ``bump_g`` at a random
    time in its held part (drawn from ``rng``)."""
    if not 0 < on_s < period_s:
        raise ValueError(f"on_s ({on_s}) must be between 0 and period_s ({period_s})")
    r = rng or random.Random(0)
    out: list[Placement] = []
    for k in range(count):
        t_on = start_s + k * period_s
        bumps: tuple[tuple[float, float], ...] = ()
        if bump_every and (k + 1) % bump_every == 0:
            bumps = ((t_on + r.uniform(0.3, 0.8) * on_s, bump_g),)
        out.append(Placement(club, t_on, t_on + on_s, bumps))
    return out
