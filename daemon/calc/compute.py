"""Answer a :class:`CalcRequest`: club numbers, the 12-inch moment, a correction, an MOI.

Plain functions over the request objects; every number comes from ``daemon.physics``, the same
code the service uses, so ``heft calc`` agrees with the dashboard for the same readings.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING, Literal

from heft.daemon.calc.requests import (
    CalcError,
    CalcRequest,
    Club,
    InputUncertainty,
    Method,
    PartsPrediction,
    PendulumRequest,
    TargetRequest,
)
from heft.daemon.physics.build_defaults import DEFAULT_HEAD_CG_FROM_END_IN
from heft.daemon.physics.club import (
    BenchInputs,
    ClubNumbers,
    club_numbers,
    weight_and_balance_bench,
)
from heft.daemon.physics.swingweight import SwingweightRangeError, moment_12in_oz_in
from heft.daemon.physics.uncertainty import UncertainValue, expanded

if TYPE_CHECKING:
    from heft.daemon.physics.correction import CorrectionNumbers
    from heft.daemon.physics.predict import ClubBuild

# Corrections, pendulums and predictions from parts import their physics where they are asked
# for: a plain measured club, the common case, should not pay for them at start-up.

# Where a correction goes when neither the target nor the club's length says: the head of a
# mid-length iron (common practice, no source).
DEFAULT_CORRECTION_AT_IN = 36.0


@dataclass(frozen=True)
class Reported:
    """A value and its expanded uncertainty (k = 2), None when its inputs carry none."""

    value: float
    u: float | None = None


@dataclass(frozen=True)
class LengthChange:
    delta_in: float
    end: str  # "tip" or "butt"
    points_before: float


@dataclass(frozen=True)
class CorrectionResult:
    numbers: CorrectionNumbers
    target_label: str  # the target as given, to the precision given
    at: Reported
    # Where the position came from: given with the target, the head (from the club's length),
    # or the built-in mid-iron head.
    at_source: Literal["given", "head", "default"]


@dataclass(frozen=True)
class CalcResult:
    method: Method
    fulcrum_in: float
    club: ClubNumbers
    bench: BenchInputs
    moment_12in_oz_in: Reported
    correction: CorrectionResult | None = None
    moi_g_in2: Reported | None = None
    length_change: LengthChange | None = None
    build: ClubBuild | None = None


def bench_of(club: Club, u: InputUncertainty, fulcrum_in: float) -> BenchInputs:
    """The raw inputs of ``club`` with their uncertainties (a prediction carries none)."""
    if isinstance(club, PartsPrediction):
        from heft.daemon.physics.predict import statics_of_parts

        s = statics_of_parts(club.build.parts(), fulcrum_in)
        return weight_and_balance_bench(
            UncertainValue(s.total_weight_g), UncertainValue(s.balance_point_in), fulcrum_in
        )
    return club.bench(u, fulcrum_in)


def calculate(request: CalcRequest) -> CalcResult:
    """Everything ``heft calc`` reports for ``request``; raises CalcError."""
    club_request = request.club
    bench = bench_of(club_request, request.uncertainty, request.fulcrum_in)
    club = club_numbers(bench)
    length_in = request.club_length_in
    if length_in is not None and not 0.0 < club.balance_point_in < length_in:
        raise CalcError(
            ("length_in",),
            f"a club {length_in:g} in long cannot balance {club.balance_point_in:.2f} in from the "
            "butt; check the length and the readings",
        )
    m12 = bench.propagate(lambda s: moment_12in_oz_in(s.total_weight_g, s.balance_point_in))
    change = build = None
    if isinstance(club_request, PartsPrediction):
        build = club_request.build
        if club_request.length_change_in is not None:
            assert club_request.points_before_change is not None
            change = LengthChange(
                club_request.length_change_in,
                club_request.change_at.value,
                club_request.points_before_change,
            )
    return CalcResult(
        method=club_request.method,
        fulcrum_in=request.fulcrum_in,
        club=club,
        bench=bench,
        moment_12in_oz_in=Reported(m12.value, bench.report_u(m12)),
        correction=None if request.target is None else _correction(request, request.target, bench),
        moi_g_in2=None if request.pendulum is None else _moi(request, request.pendulum, bench),
        length_change=change,
        build=build,
    )


def _correction(
    request: CalcRequest, target: TargetRequest, bench: BenchInputs
) -> CorrectionResult:
    # A position read off the club (given, or the head found from the length) carries the
    # position uncertainty; the built-in default is an assumption, not a reading.
    at_u = request.uncertainty.position_in
    at_in, length_in = target.at_in, request.club_length_in
    source: Literal["given", "head", "default"] = "given"
    if at_in is None:
        if length_in is not None:
            at_in, source = length_in - DEFAULT_HEAD_CG_FROM_END_IN, "head"
        else:
            at_in, at_u, source = DEFAULT_CORRECTION_AT_IN, 0.0, "default"
    position = UncertainValue(at_in, at_u)
    from heft.daemon.physics.correction import CorrectionError, correction_numbers

    try:
        numbers = correction_numbers(bench, target.points, position)
    except (CorrectionError, SwingweightRangeError) as err:
        raise CalcError(("target.label", "target.at_in"), str(err)) from None
    at = Reported(at_in, expanded(at_u) if position.has_u else None)
    return CorrectionResult(numbers, target.echo, at, source)


def _moi(request: CalcRequest, pendulum: PendulumRequest, bench: BenchInputs) -> Reported:
    """MOI about the butt from a pendulum swing."""
    from heft.daemon.physics.moi import PendulumError, moi_about_butt_numbers

    try:
        value, moi_u = moi_about_butt_numbers(
            bench,
            request.uncertainty.position(pendulum.pivot_in),
            UncertainValue(pendulum.period_s, pendulum.period_u_s),
            amplitude_rad=pendulum.amplitude_rad,
            gravity_m_s2=pendulum.gravity_m_s2,
        )
    except PendulumError as err:
        raise CalcError(("pendulum.period_s", "pendulum.pivot_in"), str(err)) from None
    return Reported(value, moi_u)
