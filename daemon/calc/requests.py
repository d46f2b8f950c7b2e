"""What ``heft calc`` is asked: frozen value objects, each checked when it is made.

A request holds numbers in grams and inches (seconds, degrees, m/s^2 for the pendulum), never
text: whoever fills it (the command line, a test, another program) has parsed the units already.
A value that cannot describe a club raises :class:`CalcError` naming the request field, so the
caller can say which of its own inputs was wrong.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Literal

from heft.daemon.physics.build_defaults import DEFAULT_GRIP_CG_IN, DEFAULT_HEAD_CG_FROM_END_IN, End
from heft.daemon.physics.club import (
    BenchInputs,
    lever_bench,
    two_supports_bench,
    weight_and_balance_bench,
)
from heft.daemon.physics.statics import StaticsError
from heft.daemon.physics.swingweight import (
    FULCRUM_14_IN,
    SwingweightLabelError,
    SwingweightRangeError,
    label_decimals,
    label_from_points,
    points_from_label,
)
from heft.daemon.physics.uncertainty import UncertainValue, combine_u, net_resolution_u
from heft.drivers.units import STANDARD_GRAVITY_M_S2

if TYPE_CHECKING:
    from heft.daemon.physics.predict import ClubBuild, Part

# The prediction code (heft.daemon.physics.predict) is imported where a parts request is made,
# not here: a measured club, the common case, should not pay for it at start-up.


class CalcError(ValueError):
    """A request that cannot be answered. ``fields`` names the request fields at fault (dotted
    from the :class:`CalcRequest`, e.g. ``uncertainty.display_step_g``); the message says what
    was expected without naming any option or key of the caller."""

    def __init__(self, fields: tuple[str, ...], message: str) -> None:
        super().__init__(message)
        self.fields = fields
        self.message = message


# --- the uncertainty model --------------------------------------------------------------------


@dataclass(frozen=True)
class InputUncertainty:
    """Standard uncertainties (one sigma) of the inputs; every one must be >= 0.

    ``balance_point_in`` None means "as ``position_in``" (a knife edge read like any position).
    """

    display_step_g: float = 0.0
    repeatability_g: float = 0.0
    position_in: float = 0.0
    balance_point_in: float | None = None
    butt_gap_in: float = 0.0  # seating against the butt stop: one error for every position

    def __post_init__(self) -> None:
        for name in ("display_step_g", "repeatability_g", "position_in", "balance_point_in",
                     "butt_gap_in"):  # fmt: skip
            value = getattr(self, name)
            if value is not None and not value >= 0:  # NaN fails too
                raise CalcError(
                    (f"uncertainty.{name}",), f"an uncertainty must be >= 0, not {value:g}"
                )

    @property
    def mass_g(self) -> float:
        """Of each net reading (load minus a tared zero): d/sqrt(6) per GUM, plus the scatter
        of repeated readings in quadrature."""
        return combine_u(net_resolution_u(self.display_step_g), self.repeatability_g)

    @property
    def knife_edge_in(self) -> float:
        return self.position_in if self.balance_point_in is None else self.balance_point_in

    def mass(self, value_g: float) -> UncertainValue:
        return UncertainValue(value_g, self.mass_g)

    def position(self, value_in: float) -> UncertainValue:
        return UncertainValue(value_in, self.position_in)

    def butt_gap(self) -> UncertainValue:
        return UncertainValue(0.0, self.butt_gap_in)


NO_UNCERTAINTY = InputUncertainty()


# --- the four ways to give a club --------------------------------------------------------------

Method = Literal["weight_balance", "supports", "lever", "parts"]


def _check_statics(club: MeasuredClub | TwoSupports | LeverBeam, fields: tuple[str, ...]) -> None:
    try:
        club.bench(NO_UNCERTAINTY, FULCRUM_14_IN).evaluate()
    except StaticsError as err:
        raise CalcError(tuple(f"club.{f}" for f in fields), str(err)) from None


@dataclass(frozen=True)
class MeasuredClub:
    """A total weight and a balance point found on a knife edge."""

    total_weight_g: float
    balance_point_in: float
    method: Method = field(default="weight_balance", init=False)

    def __post_init__(self) -> None:
        _check_statics(self, ("total_weight_g", "balance_point_in"))

    def bench(self, u: InputUncertainty, fulcrum_in: float) -> BenchInputs:
        return weight_and_balance_bench(
            u.mass(self.total_weight_g),
            UncertainValue(self.balance_point_in, u.knife_edge_in),
            fulcrum_in,
        )


@dataclass(frozen=True)
class TwoSupports:
    """Two tared readings on supports at positions from the butt stop."""

    position_a_in: float
    reading_a_g: float
    position_b_in: float
    reading_b_g: float
    method: Method = field(default="supports", init=False)

    def __post_init__(self) -> None:
        _check_statics(self, ("position_a_in", "reading_a_g", "position_b_in", "reading_b_g"))

    def bench(self, u: InputUncertainty, fulcrum_in: float) -> BenchInputs:
        return two_supports_bench(
            u.mass(self.reading_a_g),
            u.position(self.position_a_in),
            u.mass(self.reading_b_g),
            u.position(self.position_b_in),
            fulcrum_in,
            u.butt_gap(),
        )


@dataclass(frozen=True)
class LeverBeam:
    """A beam pivoting at the fulcrum read ``lever_arm_in`` from the pivot, plus a weighing."""

    force_g: float
    lever_arm_in: float
    total_weight_g: float
    method: Method = field(default="lever", init=False)

    def __post_init__(self) -> None:
        _check_statics(self, ("force_g", "lever_arm_in", "total_weight_g"))

    def bench(self, u: InputUncertainty, fulcrum_in: float) -> BenchInputs:
        return lever_bench(
            u.mass(self.force_g),
            u.position(self.lever_arm_in),
            u.mass(self.total_weight_g),
            fulcrum_in,
            u.butt_gap(),
        )


@dataclass(frozen=True)
class ExtraMass:
    """Tape, a tip or butt weight: a mass at a position; without ``rides_with`` it rides with
    the nearer end of the club."""

    name: str
    mass_g: float
    position_in: float
    rides_with: End | None = None

    def place(self, length_in: float) -> Part:
        from heft.daemon.physics.predict import Part

        end = self.rides_with
        if end is None:
            end = End.TIP if self.position_in > length_in / 2 else End.BUTT
        return Part(self.name, self.mass_g, self.position_in, end)


@dataclass(frozen=True)
class PartsPrediction:
    """A club predicted from its parts, optionally made longer or shorter at one end.

    The shaft's mass, length and balance point are as bought; the trims are cut from it.
    """

    length_in: float
    head_g: float
    shaft_g: float
    shaft_length_in: float
    shaft_balance_point_in: float
    grip_g: float
    head_cg_from_end_in: float = DEFAULT_HEAD_CG_FROM_END_IN
    grip_cg_in: float = DEFAULT_GRIP_CG_IN
    tip_trim_in: float = 0.0
    butt_trim_in: float = 0.0
    shaft_butt_at_in: float = 0.0
    extras: tuple[ExtraMass, ...] = ()
    length_change_in: float | None = None
    change_at: End = End.BUTT
    method: Method = field(default="parts", init=False)
    build: ClubBuild = field(init=False, repr=False, compare=False)
    points_before_change: float | None = field(init=False, repr=False, compare=False)

    def __post_init__(self) -> None:
        from heft.daemon.physics.predict import BuildError, change_length, predict

        build = self._build()
        before = None
        if self.length_change_in is not None:
            before = predict(build).swingweight_points
            try:
                build = change_length(build, self.length_change_in, self.change_at)
            except BuildError as err:
                raise CalcError(("club.length_change_in",), str(err)) from None
        object.__setattr__(self, "build", build)
        object.__setattr__(self, "points_before_change", before)

    def _build(self) -> ClubBuild:
        from heft.daemon.physics.predict import BuildError, ClubBuild, Shaft

        parts = []
        for i, extra in enumerate(self.extras):
            try:
                parts.append(extra.place(self.length_in))
            except BuildError as err:
                raise CalcError((f"club.extras[{i}]",), str(err)) from None
        try:
            shaft = Shaft(self.shaft_g, self.shaft_length_in, self.shaft_balance_point_in)
            if self.tip_trim_in or self.butt_trim_in:
                shaft = shaft.trimmed(tip_in=self.tip_trim_in, butt_in=self.butt_trim_in)
        except BuildError as err:
            raise CalcError(("club.shaft",), str(err)) from None
        try:
            return ClubBuild(
                length_in=self.length_in,
                head_g=self.head_g,
                shaft=shaft,
                grip_g=self.grip_g,
                head_cg_from_end_in=self.head_cg_from_end_in,
                grip_cg_in=self.grip_cg_in,
                shaft_butt_in=self.shaft_butt_at_in,
                extras=tuple(parts),
            )
        except BuildError as err:
            raise CalcError(("club",), str(err)) from None


Club = MeasuredClub | TwoSupports | LeverBeam | PartsPrediction


# --- what else is asked about the club ----------------------------------------------------------


@dataclass(frozen=True)
class TargetRequest:
    """A target swing weight as written (``D2``, ``d-1.5``, ``C9.95``) and where the correction
    mass goes (None: the head when the club's length is known, else a mid-iron head)."""

    label: str
    at_in: float | None = None
    points: float = field(init=False)
    echo: str = field(init=False)  # the target as given, to the precision given

    def __post_init__(self) -> None:
        try:
            points = points_from_label(self.label)
            echo = label_from_points(points, label_decimals(self.label))
        except (SwingweightLabelError, SwingweightRangeError) as err:
            raise CalcError(("target.label",), str(err)) from None
        object.__setattr__(self, "points", points)
        object.__setattr__(self, "echo", echo)


@dataclass(frozen=True)
class PendulumRequest:
    """The club swung from a pivot near the butt: its full-swing period and the pivot position."""

    period_s: float
    pivot_in: float
    period_u_s: float = 0.0  # standard uncertainty of the period
    amplitude_deg: float = 0.0
    gravity_m_s2: float = STANDARD_GRAVITY_M_S2

    def __post_init__(self) -> None:
        if not self.period_u_s >= 0:
            raise CalcError(
                ("pendulum.period_u_s",), f"an uncertainty must be >= 0, not {self.period_u_s:g}"
            )
        if not 0.0 <= self.amplitude_deg < 90.0:
            raise CalcError(
                ("pendulum.amplitude_deg",),
                f"{self.amplitude_deg:g} is not a swing amplitude of 0 to below 90 degrees",
            )

    @property
    def amplitude_rad(self) -> float:
        return math.radians(self.amplitude_deg)


@dataclass(frozen=True)
class CalcRequest:
    """One ``heft calc``: the club, and optionally a target and a pendulum swing.

    ``length_in`` is the measured club's length (it places a correction at the head); a club
    from parts carries its own.
    """

    club: Club
    uncertainty: InputUncertainty = NO_UNCERTAINTY
    fulcrum_in: float = FULCRUM_14_IN
    length_in: float | None = None
    target: TargetRequest | None = None
    pendulum: PendulumRequest | None = None

    def __post_init__(self) -> None:
        at_in = None if self.target is None else self.target.at_in
        length_in = self.club_length_in
        if at_in is not None and length_in is not None and not 0.0 <= at_in <= length_in:
            raise CalcError(("target.at_in",), f"{at_in:g} in is off a club {length_in:g} in long")

    @property
    def club_length_in(self) -> float | None:
        if isinstance(self.club, PartsPrediction):
            return self.club.build.length_in
        return self.length_in
