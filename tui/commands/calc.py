"""``heft calc``: club numbers from bench readings or parts, a correction to a target, MOI.

This module only reads the command line: it parses each value option's text (so a bad value gets
exactly one stderr line naming the option and the form expected, exit status 2, like argparse's
own errors), fills the request objects of ``heft.daemon.calc.requests`` and prints the result of
``heft.daemon.calc.compute.calculate``. The numbers are worked out there.
"""

from __future__ import annotations

import argparse
import math
import sys
from collections.abc import Mapping
from typing import Any

from heft.daemon.calc.compute import DEFAULT_CORRECTION_AT_IN, CalcResult, calculate
from heft.daemon.calc.requests import (
    CalcError,
    CalcRequest,
    Club,
    ExtraMass,
    InputUncertainty,
    LeverBeam,
    MeasuredClub,
    PartsPrediction,
    PendulumRequest,
    TargetRequest,
    TwoSupports,
)
from heft.daemon.physics.build_defaults import DEFAULT_GRIP_CG_IN, DEFAULT_HEAD_CG_FROM_END_IN, End
from heft.daemon.physics.swingweight import FULCRUM_14_IN
from heft.drivers.units import STANDARD_GRAVITY_M_S2, UnitError, parse_quantity
from heft.tui.commands._calc_output import print_human, result_as_json, uncertainty_text

__all__ = ["calculate_args", "register", "run", "uncertainty_text"]

PROG = "heft calc"
# Clubs weigh from about 250 g (a light driver) to 600 g (a heavy putter): common practice, no
# source. Outside a wider band than that, heft calc warns (it still answers).
PLAUSIBLE_CLUB_WEIGHT_G = (150.0, 1000.0)


class CalcInputError(ValueError):
    """Bad command-line input; the message names the option and the form expected."""


def _option(dest: str) -> str:
    return "--" + dest.replace("_", "-")


# --- parsing the text of the options ------------------------------------------------------------


def _quantity(args: argparse.Namespace, dest: str, kind: str) -> float | None:
    text = getattr(args, dest)
    if text is None:
        return None
    try:
        value = parse_quantity(text, kind=kind)
    except UnitError as err:
        raise CalcInputError(f"{_option(dest)}: {err}") from None
    if not math.isfinite(value):
        raise CalcInputError(f"{_option(dest)}: {text!r} is not a finite {kind}")
    return value


def _mass(args: argparse.Namespace, dest: str) -> float | None:
    return _quantity(args, dest, "mass")


def _length(args: argparse.Namespace, dest: str) -> float | None:
    return _quantity(args, dest, "length")


def _need(value: float | None, dest: str) -> float:
    """A value ``_require`` has already asked for; the error is a backstop."""
    if value is None:
        raise CalcInputError(f"{_option(dest)} is needed here")
    return value


def _need_mass(args: argparse.Namespace, dest: str) -> float:
    return _need(_mass(args, dest), dest)


def _need_length(args: argparse.Namespace, dest: str) -> float:
    return _need(_length(args, dest), dest)


def _number(args: argparse.Namespace, dest: str, what: str) -> float | None:
    text = getattr(args, dest)
    if text is None:
        return None
    try:
        value = float(text)
    except ValueError:
        raise CalcInputError(f"{_option(dest)}: {text!r} is not {what}") from None
    if not math.isfinite(value):
        raise CalcInputError(f"{_option(dest)}: {text!r} is not {what}")
    return value


def _given(args: argparse.Namespace, *dests: str) -> list[str]:
    return [d for d in dests if getattr(args, d) is not None]


def _require(args: argparse.Namespace, method: str, *dests: str) -> None:
    missing = [d for d in dests if getattr(args, d) is None]
    if missing:
        names = ", ".join(_option(d) for d in missing)
        raise CalcInputError(f"{method} needs {names} as well")


# --- which option a request field came from (for CalcError messages) ---------------------------

_OPTION_OF_FIELD: Mapping[str, str] = {
    "uncertainty.display_step_g": "--display-step",
    "uncertainty.repeatability_g": "--repeatability",
    "uncertainty.position_in": "--position-u",
    "uncertainty.balance_point_in": "--balance-point-u",
    "uncertainty.butt_gap_in": "--butt-gap-u",
    "club.total_weight_g": "--weight",
    "club.balance_point_in": "--balance-point",
    "club.position_a_in": "--support-a",
    "club.reading_a_g": "--reading-a",
    "club.position_b_in": "--support-b",
    "club.reading_b_g": "--reading-b",
    "club.force_g": "--lever-force",
    "club.lever_arm_in": "--lever-arm",
    "club.length_change_in": "--length-change",
    "club.shaft": "shaft",
    "club": "parts",
    "length_in": "--length",
    "target.label": "--target",
    "target.at_in": "--at",
    "pendulum.period_s": "--period",
    "pendulum.pivot_in": "--pivot",
    "pendulum.period_u_s": "--period-u",
    "pendulum.amplitude_deg": "--amplitude",
}


def _message(err: CalcError, sources: Mapping[str, str]) -> str:
    """``--option[/--option]: message``; ``sources`` names fields only the input knows (the
    parts file, each extra mass's option or file)."""
    names = [sources.get(f) or _OPTION_OF_FIELD.get(f, f) for f in err.fields]
    return f"{'/'.join(names)}: {err.message}"


# --- parts ----------------------------------------------------------------------------------

# Parts options -> the PartsPrediction field each fills (the unit suffix says mass or length).
_PARTS_FIELDS: Mapping[str, str] = {
    "length": "length_in",
    "head": "head_g",
    "head_cg_from_end": "head_cg_from_end_in",
    "shaft": "shaft_g",
    "shaft_length": "shaft_length_in",
    "shaft_balance_point": "shaft_balance_point_in",
    "tip_trim": "tip_trim_in",
    "butt_trim": "butt_trim_in",
    "shaft_butt_at": "shaft_butt_at_in",
    "grip": "grip_g",
    "grip_cg": "grip_cg_in",
}
_NEEDED_PARTS = ("length", "head", "shaft", "shaft_length", "shaft_balance_point", "grip")
# Options that only make sense for a prediction (``length`` also places a correction).
_PARTS_ONLY = (
    *(k for k in _PARTS_FIELDS if k not in ("length", "head", "shaft", "grip")),
    "extra",
    "length_change",
)
_EXTRA_FORM = "MASS@POSITION[:tip|:butt] such as 4g@35in or 10g@1in:butt"


def _parse_extra(text: str) -> ExtraMass:
    """``--extra MASS@POSITION[:tip|:butt]``."""
    body, _, rides = text.partition(":")
    mass_text, at, pos_text = body.partition("@")
    if not at:
        raise CalcInputError(f"--extra: {text!r} is not {_EXTRA_FORM}")
    try:
        mass_g = parse_quantity(mass_text, kind="mass")
        position_in = parse_quantity(pos_text, kind="length")
    except UnitError as err:
        raise CalcInputError(f"--extra: {err}; expected {_EXTRA_FORM}") from None
    end = None
    if rides.strip():
        try:
            end = End(rides.strip().lower())
        except ValueError:
            raise CalcInputError(
                f"--extra: {rides!r} is not tip or butt; expected {_EXTRA_FORM}"
            ) from None
    return ExtraMass(text, mass_g, position_in, end)


def _read_parts_file(path: str) -> tuple[dict[str, float], list[ExtraMass]]:
    try:
        with open(path, encoding="utf-8") as file:  # noqa: PTH123 - pathlib costs calc ~4 ms at start-up
            text = file.read()
    except OSError as err:
        raise CalcInputError(f"--parts: cannot read {path}: {err.strerror}") from None
    except UnicodeDecodeError:
        raise CalcInputError(f"--parts: cannot read {path}: not UTF-8 text") from None
    # Only here: pydantic and the TOML reader are not loaded for the other forms of heft calc.
    from heft.daemon.calc.parts_file import parse_parts_file

    parts = parse_parts_file(text)
    return parts.values(), parts.extras()


def _parts(args: argparse.Namespace, sources: dict[str, str]) -> PartsPrediction:
    """The prediction from --parts FILE and the parts options (options override the file)."""
    values: dict[str, float] = {}
    extras: list[ExtraMass] = []
    if args.parts is not None:
        sources["parts_file"] = f"--parts {args.parts}"
        values, extras = _read_parts_file(args.parts)
        sources.update({f"club.extras[{i}]": sources["parts_file"] for i in range(len(extras))})
    for dest, name in _PARTS_FIELDS.items():
        value = _quantity(args, dest, "mass" if name.endswith("_g") else "length")
        if value is not None:
            values[name] = value
    for text in args.extra or []:
        sources[f"club.extras[{len(extras)}]"] = "--extra"
        extras.append(_parse_extra(text))
    for dest in _NEEDED_PARTS:
        if _PARTS_FIELDS[dest] not in values:
            raise CalcInputError(
                f"a prediction from parts needs {_option(dest)} (or its key in the --parts file)"
            )
    return PartsPrediction(
        **values,
        extras=tuple(extras),
        length_change_in=_length(args, "length_change"),
        change_at=End(args.change_at),
    )


# --- filling the request --------------------------------------------------------------------


def _uncertainty(args: argparse.Namespace) -> InputUncertainty:
    return InputUncertainty(
        display_step_g=_mass(args, "display_step") or 0.0,
        repeatability_g=_mass(args, "repeatability") or 0.0,
        position_in=_length(args, "position_u") or 0.0,
        balance_point_in=_length(args, "balance_point_u"),
        butt_gap_in=_length(args, "butt_gap_u") or 0.0,
    )


def _method(args: argparse.Namespace) -> str:
    supports = _given(args, "support_a", "reading_a", "support_b", "reading_b")
    lever = _given(args, "lever_force", "lever_arm")
    parts = _given(args, "parts", "head", "shaft", "shaft_length", "shaft_balance_point", "grip")
    chosen = [n for n, g in (("supports", supports), ("lever", lever), ("parts", parts)) if g]
    if len(chosen) > 1:
        raise CalcInputError(f"give one way of reading the club, not {' and '.join(chosen)}")
    method = chosen[0] if chosen else "weight_balance"
    if method != "parts":
        for dest in _PARTS_ONLY:
            if getattr(args, dest) is not None:
                raise CalcInputError(
                    f"{_option(dest)} goes with a prediction from parts "
                    "(--parts FILE or --head/--shaft/...)"
                )
    if chosen:
        return method
    if args.weight is None and args.balance_point is None:
        raise CalcInputError(
            "give a club: --weight and --balance-point; or --support-a/--reading-a/--support-b/"
            "--reading-b; or --lever-force/--lever-arm with --weight; or parts (--parts FILE or "
            "--head/--shaft/...)"
        )
    return "weight_balance"


def _club(args: argparse.Namespace, method: str, sources: dict[str, str]) -> Club:
    """The club request for the chosen method, after checking the options that go with it."""
    if method in ("weight_balance", "parts") and args.butt_gap_u is not None:
        raise CalcInputError(
            "--butt-gap-u goes with two supports or a lever beam; for a balance point found on "
            "a knife edge, include seating in --balance-point-u"
        )
    if method == "supports":
        _require(args, "two supports", "support_a", "reading_a", "support_b", "reading_b")
        for stray in _given(args, "weight", "balance_point"):
            raise CalcInputError(f"{_option(stray)} does not go with two supports")
        reading_a = _need_mass(args, "reading_a")
        position_a = _need_length(args, "support_a")
        reading_b = _need_mass(args, "reading_b")
        position_b = _need_length(args, "support_b")
        return TwoSupports(position_a, reading_a, position_b, reading_b)
    if method == "lever":
        _require(args, "a lever beam", "lever_force", "lever_arm", "weight")
        if args.balance_point is not None:
            raise CalcInputError("--balance-point does not go with a lever beam (it is computed)")
        force = _need_mass(args, "lever_force")
        arm = _need_length(args, "lever_arm")
        return LeverBeam(force, arm, _need_mass(args, "weight"))
    if method == "parts":
        for stray in _given(args, "weight", "balance_point"):
            raise CalcInputError(f"{_option(stray)} does not go with a prediction")
        return _parts(args, sources)
    _require(args, "a measured club", "weight", "balance_point")
    weight = _need_mass(args, "weight")
    return MeasuredClub(weight, _need_length(args, "balance_point"))


def _target(args: argparse.Namespace) -> TargetRequest | None:
    if args.target is None:
        return None  # --at alone is not read
    return TargetRequest(args.target, _length(args, "at"))


def _pendulum(args: argparse.Namespace) -> PendulumRequest | None:
    if args.period is None and args.pivot is None:
        return None
    _require(args, "an MOI from a pendulum", "period", "pivot")
    period = _need(_number(args, "period", "a period in seconds such as 1.83"), "period")
    period_u = _number(args, "period_u", "a time in seconds")
    amplitude = _number(args, "amplitude", "an amplitude in degrees")
    gravity = _number(args, "gravity", "an acceleration in m/s^2 such as 9.806")
    return PendulumRequest(
        period_s=period,
        pivot_in=_need_length(args, "pivot"),
        period_u_s=period_u or 0.0,
        amplitude_deg=amplitude or 0.0,
        gravity_m_s2=STANDARD_GRAVITY_M_S2 if gravity is None else gravity,
    )


def request_from_args(args: argparse.Namespace, sources: dict[str, str]) -> CalcRequest:
    """The request the options describe; CalcInputError or CalcError (``sources`` gets the
    names of fields only the options know, for its message)."""
    fulcrum = _length(args, "fulcrum")
    uncertainty = _uncertainty(args)
    club = _club(args, _method(args), sources)
    return CalcRequest(
        club=club,
        uncertainty=uncertainty,
        fulcrum_in=FULCRUM_14_IN if fulcrum is None else fulcrum,
        length_in=None if isinstance(club, PartsPrediction) else _length(args, "length"),
        target=_target(args),
        pendulum=_pendulum(args),
    )


def calculate_args(args: argparse.Namespace) -> CalcResult:
    """Everything ``heft calc`` prints, from parsed arguments; raises CalcInputError."""
    sources: dict[str, str] = {}
    try:
        return calculate(request_from_args(args, sources))
    except CalcError as err:
        raise CalcInputError(_message(err, sources)) from None


def run(args: argparse.Namespace) -> int:
    try:
        result = calculate_args(args)
    except CalcInputError as err:
        print(f"{PROG}: error: {err}", file=sys.stderr)
        return 2
    weight_g = result.club.total_weight_g
    if not PLAUSIBLE_CLUB_WEIGHT_G[0] <= weight_g <= PLAUSIBLE_CLUB_WEIGHT_G[1]:
        # Not an error (a training club or a component may be weighed), but a slipped unit
        # suffix (412kg for 412g) should not pass unnoticed.
        print(
            f"{PROG}: warning: a total weight of {weight_g:g} g is outside the "
            f"{PLAUSIBLE_CLUB_WEIGHT_G[0]:g}-{PLAUSIBLE_CLUB_WEIGHT_G[1]:g} g of golf clubs; "
            "check the unit suffixes",
            file=sys.stderr,
        )
    if args.json:
        import json  # here: only --json needs it (start-up)

        json.dump(result_as_json(result), sys.stdout, indent=2)
        sys.stdout.write("\n")
    else:
        print_human(result, sys.stdout)
    return 0


# --- the parser ---------------------------------------------------------------------------------


# Value options by group: (flag, metavar, help). All are read as text and parsed in calculate().
_VALUE_OPTIONS: tuple[tuple[str, tuple[tuple[str, str, str], ...]], ...] = (
    ("a measured club", (
        ("--weight", "MASS", "total weight, e.g. 412g or 14.53oz"),
        ("--balance-point", "LEN", "balance point from the butt, e.g. 28.9in or 734mm"),
    )),
    ("two supports (two scales or two cells under one beam)", (
        ("--support-a", "LEN", "position of support A from the butt stop"),
        ("--reading-a", "MASS", "tared reading of support A"),
        ("--support-b", "LEN", "position of support B from the butt stop"),
        ("--reading-b", "MASS", "tared reading of support B"),
    )),
    ("lever beam (pivot at the fulcrum; needs --weight too)", (
        ("--lever-force", "MASS", "reading at the lever arm, empty beam zeroed"),
        ("--lever-arm", "LEN", "distance of that reading from the pivot"),
    )),
    ("prediction from parts (or --parts FILE.toml)", (
        ("--parts", "FILE", "TOML file of parts (see docs/calc.md)"),
        ("--length", "LEN", "club length; also places a correction at the head"),
        ("--head", "MASS", "head mass"),
        ("--head-cg-from-end", "LEN",
         f"head CG back from the club's end (default {DEFAULT_HEAD_CG_FROM_END_IN:g} in)"),
        ("--shaft", "MASS", "shaft mass before trimming"),
        ("--shaft-length", "LEN", "shaft length before trimming"),
        ("--shaft-balance-point", "LEN", "shaft balance point from its butt end"),
        ("--tip-trim", "LEN", "length cut from the shaft tip"),
        ("--butt-trim", "LEN", "length cut from the shaft butt"),
        ("--shaft-butt-at", "LEN", "where the shaft's butt sits (default 0)"),
        ("--grip", "MASS", "grip mass"),
        ("--grip-cg", "LEN", f"grip CG from the butt (default {DEFAULT_GRIP_CG_IN:g} in)"),
        ("--length-change", "LEN",
         "make the club longer (+) or shorter (-); write --length-change=-0.5in"),
    )),
    ("target", (
        ("--target", "LABEL", "target swing weight, e.g. D2 or d-1.5"),
        ("--at", "LEN", "where the correction mass goes (default: the head, from --length; "
         f"else {DEFAULT_CORRECTION_AT_IN:g} in)"),
    )),
    ("MOI from a pendulum swing", (
        ("--period", "S", "period of one full swing in seconds"),
        ("--pivot", "LEN", "pivot position from the butt"),
        ("--period-u", "S", "standard uncertainty of the period"),
        ("--amplitude", "DEG", "swing amplitude in degrees (default 0: small swings)"),
        ("--gravity", "M/S2", "local gravity (default 9.80665)"),
    )),
    ("uncertainty of the inputs (standard uncertainties)", (
        ("--display-step", "MASS", "the scale's display step d (u = d/sqrt(6))"),
        ("--repeatability", "MASS", "scatter of repeated readings (one sigma)"),
        ("--position-u", "LEN", "uncertainty of each position"),
        ("--balance-point-u", "LEN", "uncertainty of --balance-point"),
        ("--butt-gap-u", "LEN",
         "how well clubs sit against the butt stop (supports and lever beam)"),
    )),
)  # fmt: skip


def register(subparsers: Any) -> None:
    p: argparse.ArgumentParser = subparsers.add_parser(
        "calc",
        help="total weight, balance point, swing weight and corrections from numbers you give",
        description=(
            "Club numbers from bench readings or from parts. Masses accept g, oz, kg, lb "
            "(bare numbers are grams); lengths accept in, mm, cm (bare numbers are inches). "
            "Positions are measured from the butt (the end of the grip cap)."
        ),
    )
    groups = {}
    for title, options in _VALUE_OPTIONS:
        groups[title] = group = p.add_argument_group(title)
        for flag, metavar, text in options:
            group.add_argument(flag, metavar=metavar, help=text)
    parts = groups["prediction from parts (or --parts FILE.toml)"]
    parts.add_argument(
        "--extra",
        metavar="MASS@LEN[:tip|:butt]",
        action="append",
        help="another mass: tape, tip weight, butt weight (repeatable)",
    )
    parts.add_argument(
        "--change-at",
        choices=("tip", "butt"),
        default="butt",
        help="where the length changes (default butt)",
    )
    p.add_argument("--fulcrum", metavar="LEN", help="fulcrum for the moment (default 14 in)")
    p.add_argument(
        "--json", action="store_true", help="print JSON (unit-suffixed keys) instead of text"
    )
    p.set_defaults(func=run)
