"""The numbers heft reports for one club, with expanded uncertainties, from any bench method.

Every ``*_u`` field is the EXPANDED uncertainty U = 2*u_c (k = 2, GUM) propagated from the
inputs' standard uncertainties, or None when no input that value depends on carried one (a
balance point read on a knife edge does not get the weighing's uncertainty). ``moment_g_in`` is
about the requested fulcrum (14 in unless stated); the swing weight is always read on the 14-inch
Lorythmic scale. A swing weight off the A0..G10 scale keeps its points and gets the label
``'<A0'`` or ``'>G10'`` so it is never mistaken for an on-scale value.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from dataclasses import asdict, dataclass
from typing import ParamSpec

from heft.daemon.physics.statics import (
    ClubStatics,
    balance_point_from_moment_in,
    lever_statics,
    two_support_statics,
)
from heft.daemon.physics.swingweight import (
    FULCRUM_14_IN,
    G_IN_PER_POINT,
    describe_points,
    moment_about_g_in,
    points_from_moment_g_in,
)
from heft.daemon.physics.uncertainty import UncertainValue, expanded, propagate
from heft.drivers.units import g_in_to_oz_in

P = ParamSpec("P")
# The club seated against the butt stop, exactly (no seating uncertainty given).
NO_BUTT_GAP = UncertainValue(0.0)


@dataclass(frozen=True)
class ClubNumbers:
    total_weight_g: float
    total_weight_g_u: float | None
    balance_point_in: float
    balance_point_in_u: float | None
    moment_g_in: float
    moment_g_in_u: float | None
    moment_oz_in: float
    moment_oz_in_u: float | None
    swingweight: str
    swingweight_points: float
    swingweight_points_u: float | None

    def as_dict(self) -> dict[str, object]:
        """Field name -> value; the keys match daemon.measurement.Measurement."""
        return asdict(self)


@dataclass(frozen=True)
class BenchInputs:
    """One bench method: its statics as a function of named raw inputs, and those inputs.

    Keeping the raw inputs (not the derived W and BP) lets every later quantity, corrections
    included, be propagated from independent readings as the GUM requires.
    """

    statics: Callable[..., ClubStatics]
    inputs: Mapping[str, UncertainValue]
    fulcrum_in: float = FULCRUM_14_IN

    def evaluate(self) -> ClubStatics:
        """The statics at the input values (raises StaticsError on impossible input)."""
        return self.statics(**{k: x.value for k, x in self.inputs.items()})

    def propagate(self, quantity: Callable[[ClubStatics], float]) -> UncertainValue:
        """Value and standard uncertainty of ``quantity(statics)`` over the raw inputs."""

        def f(**v: float) -> float:
            return quantity(self.statics(**v))

        return propagate(f, self.inputs)

    def propagate_with(
        self,
        extra: Mapping[str, UncertainValue],
        quantity: Callable[[ClubStatics, Mapping[str, float]], float],
    ) -> UncertainValue:
        """Like :meth:`propagate` for a quantity that also needs further inputs (a position, a
        period...), given as ``extra`` and passed to ``quantity`` by name."""
        clash = set(extra) & set(self.inputs)
        if clash:
            raise ValueError(f"extra inputs {sorted(clash)} clash with the bench's own")

        def f(**v: float) -> float:
            mine = {k: v[k] for k in self.inputs}
            theirs = {k: v[k] for k in extra}
            return quantity(self.statics(**mine), theirs)

        return propagate(f, {**self.inputs, **extra})

    def report_u(self, x: UncertainValue, scale: float = 1.0) -> float | None:
        """Expanded uncertainty (k = 2) of ``x`` times ``scale``, or None when ``x`` depends on no
        input that carries an uncertainty."""
        return expanded(x.u) * scale if x.has_u else None


def moment_14in_g_in(statics: ClubStatics, fulcrum_in: float) -> float:
    """Moment about the 14-inch fulcrum whatever fulcrum ``statics`` was taken about."""
    if fulcrum_in == FULCRUM_14_IN:
        return statics.moment_g_in
    return moment_about_g_in(statics.total_weight_g, statics.balance_point_in, FULCRUM_14_IN)


def club_numbers(bench: BenchInputs) -> ClubNumbers:
    """Propagate each reported quantity separately from the independent raw inputs."""
    bench.evaluate()
    w = bench.propagate(lambda s: s.total_weight_g)
    bp = bench.propagate(lambda s: s.balance_point_in)
    m = bench.propagate(lambda s: s.moment_g_in)
    m14 = bench.propagate(lambda s: moment_14in_g_in(s, bench.fulcrum_in))
    points = points_from_moment_g_in(m14.value)
    return ClubNumbers(
        total_weight_g=w.value,
        total_weight_g_u=bench.report_u(w),
        balance_point_in=bp.value,
        balance_point_in_u=bench.report_u(bp),
        moment_g_in=m.value,
        moment_g_in_u=bench.report_u(m),
        moment_oz_in=g_in_to_oz_in(m.value),
        moment_oz_in_u=bench.report_u(m, g_in_to_oz_in(1.0)),
        swingweight=describe_points(points),
        swingweight_points=points,
        swingweight_points_u=bench.report_u(m14, 1.0 / G_IN_PER_POINT),
    )


def two_supports_bench(
    reading_a_g: UncertainValue,
    position_a_in: UncertainValue,
    reading_b_g: UncertainValue,
    position_b_in: UncertainValue,
    fulcrum_in: float = FULCRUM_14_IN,
    butt_gap_in: UncertainValue = NO_BUTT_GAP,
) -> BenchInputs:
    """Two tared support readings at positions from the butt stop. ``butt_gap_in``: how far the
    club may sit short of the stop (see daemon.physics.statics), one input shared by both
    positions, so its effect is propagated as the correlated shift it is."""

    def statics(
        reading_a_g: float,
        position_a_in: float,
        reading_b_g: float,
        position_b_in: float,
        butt_gap_in: float,
    ) -> ClubStatics:
        return two_support_statics(
            reading_a_g, position_a_in, reading_b_g, position_b_in, fulcrum_in, butt_gap_in
        )

    inputs = {
        "reading_a_g": reading_a_g,
        "position_a_in": position_a_in,
        "reading_b_g": reading_b_g,
        "position_b_in": position_b_in,
        "butt_gap_in": butt_gap_in,
    }
    return BenchInputs(statics, inputs, fulcrum_in)


def lever_bench(
    force_g: UncertainValue,
    lever_arm_in: UncertainValue,
    total_weight_g: UncertainValue,
    fulcrum_in: float = FULCRUM_14_IN,
    butt_gap_in: UncertainValue = NO_BUTT_GAP,
) -> BenchInputs:
    """A fulcrum-lever beam (force at a lever arm from the pivot) plus a separate weighing;
    ``butt_gap_in`` as for :func:`two_supports_bench`."""

    def statics(
        force_g: float, lever_arm_in: float, total_weight_g: float, butt_gap_in: float
    ) -> ClubStatics:
        return lever_statics(force_g, lever_arm_in, total_weight_g, fulcrum_in, butt_gap_in)

    inputs = {
        "force_g": force_g,
        "lever_arm_in": lever_arm_in,
        "total_weight_g": total_weight_g,
        "butt_gap_in": butt_gap_in,
    }
    return BenchInputs(statics, inputs, fulcrum_in)


def weight_and_balance_bench(
    total_weight_g: UncertainValue,
    balance_point_in: UncertainValue,
    fulcrum_in: float = FULCRUM_14_IN,
) -> BenchInputs:
    """A total weight and a balance point found on a knife edge."""

    def statics(total_weight_g: float, balance_point_in: float) -> ClubStatics:
        moment = moment_about_g_in(total_weight_g, balance_point_in, fulcrum_in)
        # Through the moment so one definition of BP (and its error message) serves all methods.
        return ClubStatics(
            total_weight_g,
            balance_point_from_moment_in(moment, total_weight_g, fulcrum_in),
            moment,
        )

    inputs = {"total_weight_g": total_weight_g, "balance_point_in": balance_point_in}
    return BenchInputs(statics, inputs, fulcrum_in)


def _numbers_from(bench: Callable[P, BenchInputs]) -> Callable[P, ClubNumbers]:
    """``club_numbers(bench(...))`` with the bench builder's own signature."""

    def numbers(*args: P.args, **kwargs: P.kwargs) -> ClubNumbers:
        return club_numbers(bench(*args, **kwargs))

    numbers.__doc__ = f"Club numbers from the readings :func:`{bench.__name__}` takes."
    return numbers


# Club numbers straight from the readings of each bench method (same arguments as the builders).
club_from_two_supports = _numbers_from(two_supports_bench)
club_from_lever = _numbers_from(lever_bench)
club_from_weight_and_balance = _numbers_from(weight_and_balance_bench)
