"""Predict a club from its parts, and the effect of a length change (pure, grams and inches).

Every part is a mass at a position from the butt, so W = sum m_i, BP = sum m_i*x_i / W and the
moment about the fulcrum is sum m_i*(x_i - 14) (statics; moments add).

The shaft is modelled with a linear mass density along its length, fitted to its measured mass
and balance point (a shaft heavier towards the butt balances nearer the butt). That model lets
us trim the tip or the butt exactly: the removed piece is the integral of the density over it.
A linear density that stays non-negative needs the balance point between 1/3 and 2/3 of the
shaft's length, which every real shaft satisfies.
"""

from __future__ import annotations

import math
from collections.abc import Iterable
from dataclasses import dataclass, replace

from heft.daemon.physics.build_defaults import DEFAULT_GRIP_CG_IN, DEFAULT_HEAD_CG_FROM_END_IN, End
from heft.daemon.physics.club import ClubNumbers, club_from_weight_and_balance
from heft.daemon.physics.statics import ClubStatics, balance_point_from_moment_in
from heft.daemon.physics.swingweight import FULCRUM_14_IN
from heft.daemon.physics.uncertainty import UncertainValue


class BuildError(ValueError):
    """Parts that cannot make a club (negative mass, a shaft balance point off the shaft...)."""


@dataclass(frozen=True)
class Part:
    """A mass at a position from the butt. ``rides_with`` says which end it moves with when the
    club's length changes: the head (tape, tip weights, ferrule) or the butt (grip, butt weight).
    """

    name: str
    mass_g: float
    position_in: float
    rides_with: End = End.BUTT

    def __post_init__(self) -> None:
        if not math.isfinite(self.mass_g) or self.mass_g < 0:
            raise BuildError(f"{self.name}: mass must be >= 0 g, not {self.mass_g:g}")
        if not math.isfinite(self.position_in):
            raise BuildError(f"{self.name}: position must be a number of inches from the butt")


@dataclass(frozen=True)
class Shaft:
    """A shaft as it will be installed: mass, length and balance point from ITS OWN butt end."""

    mass_g: float
    length_in: float
    balance_point_in: float

    def __post_init__(self) -> None:
        # Written so that NaN fails too (every comparison with NaN is False).
        if not (0 < self.mass_g < math.inf and 0 < self.length_in < math.inf):
            raise BuildError(
                f"shaft mass and length must be positive finite numbers, not {self.mass_g:g} g, "
                f"{self.length_in:g} in"
            )
        lo, hi = self.length_in / 3.0, 2.0 * self.length_in / 3.0
        if not lo - 1e-9 <= self.balance_point_in <= hi + 1e-9:
            raise BuildError(
                f"shaft balance point {self.balance_point_in:g} in must lie between 1/3 and 2/3 "
                f"of its {self.length_in:g} in length ({lo:.2f}..{hi:.2f} in from its butt)"
            )

    def _density_coefficients(self) -> tuple[float, float]:
        """(a, b) of the density a + b*s g/in, s measured from the shaft's butt."""
        length = self.length_in
        b = 12.0 * self.mass_g * (self.balance_point_in - length / 2.0) / length**3
        a = self.mass_g / length - b * length / 2.0
        return a, b

    def density_g_per_in(self, s_in: float) -> float:
        """Mass per inch at ``s_in`` from the shaft's butt (model)."""
        a, b = self._density_coefficients()
        return a + b * s_in

    def segment(self, start_in: float, end_in: float) -> tuple[float, float]:
        """Mass and first moment about the shaft's butt of the piece ``start_in``..``end_in``."""
        a, b = self._density_coefficients()
        mass = a * (end_in - start_in) + b * (end_in**2 - start_in**2) / 2.0
        moment = a * (end_in**2 - start_in**2) / 2.0 + b * (end_in**3 - start_in**3) / 3.0
        return mass, moment

    def trimmed(self, tip_in: float = 0.0, butt_in: float = 0.0) -> Shaft:
        """The shaft after cutting ``tip_in`` off the tip and ``butt_in`` off the butt."""
        if tip_in < 0 or butt_in < 0 or tip_in + butt_in >= self.length_in:
            raise BuildError(
                f"cannot trim {tip_in:g} in (tip) and {butt_in:g} in (butt) from a "
                f"{self.length_in:g} in shaft"
            )
        mass, moment = self.segment(butt_in, self.length_in - tip_in)
        return Shaft(mass, self.length_in - tip_in - butt_in, moment / mass - butt_in)


@dataclass(frozen=True)
class ClubBuild:
    """A club as parts. Positions are inches from the butt (the end of the grip cap)."""

    length_in: float
    head_g: float
    shaft: Shaft
    grip_g: float
    head_cg_from_end_in: float = DEFAULT_HEAD_CG_FROM_END_IN
    grip_cg_in: float = DEFAULT_GRIP_CG_IN
    shaft_butt_in: float = 0.0  # where the shaft's butt end sits (the grip cap's thickness)
    extras: tuple[Part, ...] = ()

    def __post_init__(self) -> None:
        if not 0 < self.length_in < math.inf:
            raise BuildError(f"club length must be positive, not {self.length_in:g} in")
        self.parts()  # each Part checks its own mass and position (BuildError naming it)

    def parts(self) -> tuple[Part, ...]:
        shaft_cg_in = self.shaft_butt_in + self.shaft.balance_point_in
        return (
            Part("head", self.head_g, self.length_in - self.head_cg_from_end_in, End.TIP),
            Part("shaft", self.shaft.mass_g, shaft_cg_in),
            Part("grip", self.grip_g, self.grip_cg_in),
            *self.extras,
        )


def statics_of_parts(parts: Iterable[Part], fulcrum_in: float = FULCRUM_14_IN) -> ClubStatics:
    """W, BP and the moment about ``fulcrum_in`` of a set of point masses."""
    items = list(parts)
    total_weight_g = math.fsum(p.mass_g for p in items)
    moment_g_in = math.fsum(p.mass_g * (p.position_in - fulcrum_in) for p in items)
    return ClubStatics(
        total_weight_g,
        balance_point_from_moment_in(moment_g_in, total_weight_g, fulcrum_in),
        moment_g_in,
    )


def predict(build: ClubBuild, fulcrum_in: float = FULCRUM_14_IN) -> ClubNumbers:
    """Club numbers for a build (no uncertainties: the ``_u`` fields are None)."""
    s = statics_of_parts(build.parts(), fulcrum_in)
    return club_from_weight_and_balance(
        UncertainValue(s.total_weight_g), UncertainValue(s.balance_point_in), fulcrum_in
    )


def change_length(
    build: ClubBuild, delta_in: float, end: End, extension_g_per_in: float | None = None
) -> ClubBuild:
    """The build after making it ``delta_in`` longer (negative: shorter) at the tip or the butt.

    Shorter: the shaft is cut at that end. Longer: an extension of ``extension_g_per_in`` (default:
    the shaft's own density at that end) fills the gap. Either way the head and everything that
    rides with it move by ``delta_in``; the grip and butt parts stay where they are.
    """
    end = End(end)
    shaft, shaft_butt_in = build.shaft, build.shaft_butt_in
    added: list[Part] = []
    if delta_in < 0:
        cut = -delta_in
        shaft = shaft.trimmed(tip_in=cut) if end is End.TIP else shaft.trimmed(butt_in=cut)
    elif delta_in > 0:
        at_s = shaft.length_in if end is End.TIP else 0.0
        density = shaft.density_g_per_in(at_s) if extension_g_per_in is None else extension_g_per_in
        if end is End.TIP:
            start_in = shaft_butt_in + shaft.length_in
        else:
            start_in = shaft_butt_in
            shaft_butt_in += delta_in  # the shaft moves out along with the head
        added.append(Part(f"{end.value} extension", density * delta_in, start_in + delta_in / 2))
    extras = tuple(
        replace(p, position_in=p.position_in + delta_in) if p.rides_with is End.TIP else p
        for p in build.extras
    )
    return replace(
        build,
        length_in=build.length_in + delta_in,
        shaft=shaft,
        shaft_butt_in=shaft_butt_in,
        extras=extras + tuple(added),
    )
