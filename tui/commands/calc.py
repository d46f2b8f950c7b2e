"""``heft calc``: club numbers from bench readings or parts, a correction to a target, MOI.

All value options are taken as text and parsed here, so a bad value gets exactly one stderr line
naming the option and the form expected (exit status 2), like argparse's own errors.
"""

from __future__ import annotations

import argparse
import json
import math
import sys
import tomllib
from collections.abc import Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Any, TextIO

from heft.daemon.physics.club import (
    BenchInputs,
    ClubNumbers,
    club_numbers,
    lever_bench,
    two_supports_bench,
    weight_and_balance_bench,
)
from heft.daemon.physics.correction import CorrectionError, CorrectionNumbers, correction_numbers
from heft.daemon.physics.moi import STANDARD_GRAVITY_M_S2, PendulumError, moi_about_butt_numbers
from heft.daemon.physics.predict import (
    DEFAULT_GRIP_CG_IN,
    DEFAULT_HEAD_CG_FROM_END_IN,
    BuildError,
    ClubBuild,
    End,
    Part,
    Shaft,
    change_length,
    predict,
    statics_of_parts,
)
from heft.daemon.physics.statics import StaticsError
from heft.daemon.physics.swingweight import (
    FULCRUM_14_IN,
    SwingweightLabelError,
    SwingweightRangeError,
    label_decimals,
    label_from_points,
    moment_12in_oz_in,
    points_from_label,
    points_in_range,
)
from heft.daemon.physics.uncertainty import (
    UncertainValue,
    combine_u,
    expanded,
    net_resolution_u,
)
from heft.drivers.units import (
    UnitError,
    g_in2_to_kg_cm2,
    g_to_oz,
    in_to_mm,
    parse_quantity,
)

PROG = "heft calc"
# Clubs weigh from about 250 g (a light driver) to 600 g (a heavy putter): common practice, no
# source. Outside a wider band than that, heft calc warns (it still answers).
PLAUSIBLE_CLUB_WEIGHT_G = (150.0, 1000.0)

# Where a correction goes when neither --at nor --length says: the head of a mid-length iron.
DEFAULT_CORRECTION_AT_IN = 36.0


class CalcInputError(ValueError):
    """Bad command-line input; the message names the option and the form expected."""


# --- parsing helpers ------------------------------------------------------------------------


def _quantity(args: argparse.Namespace, dest: str, kind: str) -> float | None:
    text = getattr(args, dest)
    if text is None:
        return None
    option = "--" + dest.replace("_", "-")
    try:
        value = parse_quantity(text, kind=kind)
    except UnitError as err:
        raise CalcInputError(f"{option}: {err}") from None
    if not math.isfinite(value):
        raise CalcInputError(f"{option}: {text!r} is not a finite {kind}")
    return value


def _mass(args: argparse.Namespace, dest: str) -> float | None:
    return _quantity(args, dest, "mass")


def _length(args: argparse.Namespace, dest: str) -> float | None:
    return _quantity(args, dest, "length")


def _need(value: float | None, dest: str) -> float:
    """A value ``_require`` has already asked for; the error is a backstop."""
    if value is None:
        raise CalcInputError(f"--{dest.replace('_', '-')} is needed here")
    return value


def _need_mass(args: argparse.Namespace, dest: str) -> float:
    return _need(_mass(args, dest), dest)


def _need_length(args: argparse.Namespace, dest: str) -> float:
    return _need(_length(args, dest), dest)


def _number(args: argparse.Namespace, dest: str, what: str) -> float | None:
    text = getattr(args, dest)
    if text is None:
        return None
    option = "--" + dest.replace("_", "-")
    try:
        value = float(text)
    except ValueError:
        raise CalcInputError(f"{option}: {text!r} is not {what}") from None
    if not math.isfinite(value):
        raise CalcInputError(f"{option}: {text!r} is not {what}")
    return value


def _non_negative(option: str, value: float | None) -> float:
    if value is None:
        return 0.0
    if value < 0:
        raise CalcInputError(f"{option}: an uncertainty must be >= 0, not {value:g}")
    return value


def _given(args: argparse.Namespace, *dests: str) -> list[str]:
    return [d for d in dests if getattr(args, d) is not None]


def _require(args: argparse.Namespace, method: str, *dests: str) -> None:
    missing = [d for d in dests if getattr(args, d) is None]
    if missing:
        names = ", ".join("--" + d.replace("_", "-") for d in missing)
        raise CalcInputError(f"{method} needs {names} as well")


# --- the uncertainty model --------------------------------------------------------------------


@dataclass(frozen=True)
class InputUncertainty:
    """Standard uncertainties applied to every reading and every position."""

    mass_g: float = 0.0
    position_in: float = 0.0
    balance_point_in: float = 0.0
    butt_gap_in: float = 0.0  # seating against the butt stop: one error for every position

    def butt_gap(self) -> UncertainValue:
        return UncertainValue(0.0, self.butt_gap_in)

    def mass(self, value_g: float) -> UncertainValue:
        return UncertainValue(value_g, self.mass_g)

    def position(self, value_in: float) -> UncertainValue:
        return UncertainValue(value_in, self.position_in)


def _uncertainty(args: argparse.Namespace) -> InputUncertainty:
    step = _non_negative("--display-step", _mass(args, "display_step"))
    repeat = _non_negative("--repeatability", _mass(args, "repeatability"))
    position = _non_negative("--position-u", _length(args, "position_u"))
    bp_u = _length(args, "balance_point_u")
    balance = position if bp_u is None else _non_negative("--balance-point-u", bp_u)
    gap = _non_negative("--butt-gap-u", _length(args, "butt_gap_u"))
    # Each reading is a net reading (load minus a tared zero): d/sqrt(6) per GUM, plus the
    # scatter of repeated readings in quadrature.
    return InputUncertainty(combine_u(net_resolution_u(step), repeat), position, balance, gap)


# --- parts --------------------------------------------------------------------------------------


@dataclass(frozen=True)
class _ExtraSpec:
    """An extra mass as given; which end it rides with may still depend on the club's length."""

    name: str
    mass_g: float
    position_in: float
    rides_with: End | None
    source: str  # the option or file it came from, for messages

    def place(self, length_in: float) -> Part:
        """The part; without a stated end it rides with the nearer one."""
        end = self.rides_with
        if end is None:
            end = End.TIP if self.position_in > length_in / 2 else End.BUTT
        try:
            return Part(self.name, self.mass_g, self.position_in, end)
        except BuildError as err:
            raise CalcInputError(f"{self.source}: {err}") from None


_EXTRA_FORM = "MASS@POSITION[:tip|:butt] such as 4g@35in or 10g@1in:butt"


def _end_or_none(text: str, source: str, form: str) -> End | None:
    if not text.strip():
        return None
    try:
        return End(text.strip().lower())
    except ValueError:
        raise CalcInputError(f"{source}: {text!r} is not tip or butt; expected {form}") from None


def _parse_extra(text: str) -> _ExtraSpec:
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
    return _ExtraSpec(
        text, mass_g, position_in, _end_or_none(rides, "--extra", _EXTRA_FORM), "--extra"
    )


# Parts-file keys and the option each mirrors: option dest -> (table, key, kind).
_TOML_KEYS: Mapping[str, tuple[str, str, str]] = {
    "length": ("", "length", "length"),
    "head": ("head", "mass", "mass"),
    "head_cg_from_end": ("head", "cg_from_end", "length"),
    "shaft": ("shaft", "mass", "mass"),
    "shaft_length": ("shaft", "length", "length"),
    "shaft_balance_point": ("shaft", "balance_point", "length"),
    "tip_trim": ("shaft", "tip_trim", "length"),
    "butt_trim": ("shaft", "butt_trim", "length"),
    "shaft_butt_at": ("shaft", "butt_at", "length"),
    "grip": ("grip", "mass", "mass"),
    "grip_cg": ("grip", "cg", "length"),
}
_EXTRA_KEYS = {"name", "mass", "at", "rides_with"}


def _toml_value(source: str, where: str, raw: object, kind: str) -> float:
    if isinstance(raw, bool) or not isinstance(raw, int | float | str):
        raise CalcInputError(f"{source}: {where} must be a number or a string like '262g'")
    if isinstance(raw, str):
        try:
            return parse_quantity(raw, kind=kind)
        except UnitError as err:
            raise CalcInputError(f"{source}: {where}: {err}") from None
    if not math.isfinite(raw):  # TOML allows nan and inf
        raise CalcInputError(f"{source}: {where} must be a finite number, not {raw}")
    return float(raw)


def _check_keys(source: str, where: str, found: Mapping[str, object], allowed: set[str]) -> None:
    unknown = sorted(set(found) - allowed)
    if unknown:
        raise CalcInputError(
            f"{source}: unknown key {unknown[0]!r} in {where}; expected one of {sorted(allowed)}"
        )


def _load_parts_file(path: Path) -> tuple[dict[str, float], list[_ExtraSpec]]:
    source = f"--parts {path}"
    try:
        data = tomllib.loads(path.read_text(encoding="utf-8"))
    except OSError as err:
        raise CalcInputError(f"--parts: cannot read {path}: {err.strerror}") from None
    except tomllib.TOMLDecodeError as err:
        raise CalcInputError(f"{source}: not valid TOML: {err}") from None
    tables: dict[str, set[str]] = {"": {"extra"}}
    for table, key, _ in _TOML_KEYS.values():
        tables.setdefault(table, set()).add(key)
    _check_keys(source, "the top level", data, tables[""] | (set(tables) - {""}))
    values: dict[str, float] = {}
    for table, allowed in tables.items():
        container = data.get(table, {}) if table else data
        if not isinstance(container, dict):
            raise CalcInputError(f"{source}: [{table}] must be a table")
        if table:
            _check_keys(source, f"[{table}]", container, allowed)
    for name, (table, key, kind) in _TOML_KEYS.items():
        container = data.get(table, {}) if table else data
        if key in container:
            where = f"{table}.{key}" if table else key
            values[name] = _toml_value(source, where, container[key], kind)
    extras: list[_ExtraSpec] = []
    raw_extras = data.get("extra", [])
    if not isinstance(raw_extras, list):
        raise CalcInputError(f"{source}: extra masses are [[extra]] tables")
    for i, item in enumerate(raw_extras, start=1):
        where = f"[[extra]] #{i}"
        if not isinstance(item, dict) or "mass" not in item or "at" not in item:
            raise CalcInputError(f"{source}: {where} needs mass and at")
        _check_keys(source, where, item, _EXTRA_KEYS)
        extras.append(
            _ExtraSpec(
                str(item.get("name", f"extra {i}")),
                _toml_value(source, f"{where} mass", item["mass"], "mass"),
                _toml_value(source, f"{where} at", item["at"], "length"),
                _end_or_none(str(item.get("rides_with", "")), source, "rides_with = tip or butt"),
                source,
            )
        )
    return values, extras


# Options that only make sense for a prediction (``length`` also places a correction).
_PARTS_ONLY = (
    *(k for k in _TOML_KEYS if k not in ("length", "head", "shaft", "grip")),
    "extra",
    "length_change",
)


def _build_from_parts(args: argparse.Namespace) -> ClubBuild:
    values: dict[str, float] = {}
    extras: list[_ExtraSpec] = []
    if args.parts is not None:
        values, extras = _load_parts_file(Path(args.parts))
    for name, (_, _, kind) in _TOML_KEYS.items():
        value = _quantity(args, name, kind)
        if value is not None:
            values[name] = value  # options override the file
    extras += [_parse_extra(text) for text in args.extra or []]
    for needed in ("length", "head", "shaft", "shaft_length", "shaft_balance_point", "grip"):
        if needed not in values:
            option = "--" + needed.replace("_", "-")
            raise CalcInputError(
                f"a prediction from parts needs {option} (or its key in the --parts file)"
            )
    length_in = values["length"]
    parts = tuple(extra.place(length_in) for extra in extras)
    try:
        shaft = Shaft(values["shaft"], values["shaft_length"], values["shaft_balance_point"])
        tip, butt = values.get("tip_trim", 0.0), values.get("butt_trim", 0.0)
        if tip or butt:
            shaft = shaft.trimmed(tip_in=tip, butt_in=butt)
    except BuildError as err:
        raise CalcInputError(f"shaft: {err}") from None
    try:
        return ClubBuild(
            length_in=length_in,
            head_g=values["head"],
            shaft=shaft,
            grip_g=values["grip"],
            head_cg_from_end_in=values.get("head_cg_from_end", DEFAULT_HEAD_CG_FROM_END_IN),
            grip_cg_in=values.get("grip_cg", DEFAULT_GRIP_CG_IN),
            shaft_butt_in=values.get("shaft_butt_at", 0.0),
            extras=parts,
        )
    except BuildError as err:
        raise CalcInputError(f"parts: {err}") from None


# --- the calculation ----------------------------------------------------------------------------


@dataclass(frozen=True)
class Reported:
    """A value and its expanded uncertainty (k = 2), None when its inputs carry none."""

    value: float
    u: float | None = None


@dataclass(frozen=True)
class _Method:
    title: str  # heads the text output
    options: str  # what a statics error is about


_METHODS: Mapping[str, _Method] = {
    "weight_balance": _Method("Measured club", "--weight/--balance-point"),
    "supports": _Method("Club on two supports", "--support-a/--reading-a/--support-b/--reading-b"),
    "lever": _Method("Club on a lever beam", "--lever-force/--lever-arm/--weight"),
    "parts": _Method("Predicted club (from parts)", "parts"),
}


@dataclass(frozen=True)
class CalcResult:
    method: str
    fulcrum_in: float
    club: ClubNumbers
    bench: BenchInputs
    moment_12in_oz_in: Reported
    correction: CorrectionNumbers | None = None
    target_label: str | None = None  # the target as given, to the precision given
    correction_at: Reported | None = None
    correction_at_default: str | None = None
    moi_g_in2: Reported | None = None
    length_change: tuple[float, str, float] | None = None  # delta_in, end, points before
    build: ClubBuild | None = None


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
                option = "--" + dest.replace("_", "-")
                raise CalcInputError(
                    f"{option} goes with a prediction from parts "
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


def _bench(
    args: argparse.Namespace, method: str, u: InputUncertainty, fulcrum: float
) -> tuple[BenchInputs, ClubBuild | None, tuple[float, str, float] | None]:
    """The bench inputs for the chosen method, plus the build and length change for parts."""
    if method in ("weight_balance", "parts") and args.butt_gap_u is not None:
        raise CalcInputError(
            "--butt-gap-u goes with two supports or a lever beam; for a balance point found on "
            "a knife edge, include seating in --balance-point-u"
        )
    if method == "supports":
        _require(args, "two supports", "support_a", "reading_a", "support_b", "reading_b")
        for stray in _given(args, "weight", "balance_point"):
            raise CalcInputError(f"--{stray.replace('_', '-')} does not go with two supports")
        return (
            two_supports_bench(
                u.mass(_need_mass(args, "reading_a")),
                u.position(_need_length(args, "support_a")),
                u.mass(_need_mass(args, "reading_b")),
                u.position(_need_length(args, "support_b")),
                fulcrum,
                u.butt_gap(),
            ),
            None,
            None,
        )
    if method == "lever":
        _require(args, "a lever beam", "lever_force", "lever_arm", "weight")
        if args.balance_point is not None:
            raise CalcInputError("--balance-point does not go with a lever beam (it is computed)")
        return (
            lever_bench(
                u.mass(_need_mass(args, "lever_force")),
                u.position(_need_length(args, "lever_arm")),
                u.mass(_need_mass(args, "weight")),
                fulcrum,
                u.butt_gap(),
            ),
            None,
            None,
        )
    if method == "parts":
        for stray in _given(args, "weight", "balance_point"):
            raise CalcInputError(f"--{stray.replace('_', '-')} does not go with a prediction")
        build = _build_from_parts(args)
        change = None
        if args.length_change is not None:
            delta = _need_length(args, "length_change")
            points_before = predict(build).swingweight_points
            try:
                build = change_length(build, delta, End(args.change_at))
            except BuildError as err:
                raise CalcInputError(f"--length-change: {err}") from None
            change = (delta, args.change_at, points_before)
        s = statics_of_parts(build.parts(), fulcrum)
        bench = weight_and_balance_bench(
            UncertainValue(s.total_weight_g), UncertainValue(s.balance_point_in), fulcrum
        )
        return bench, build, change
    _require(args, "a measured club", "weight", "balance_point")
    return (
        weight_and_balance_bench(
            u.mass(_need_mass(args, "weight")),
            UncertainValue(_need_length(args, "balance_point"), u.balance_point_in),
            fulcrum,
        ),
        None,
        None,
    )


def calculate(args: argparse.Namespace) -> CalcResult:
    """Everything ``heft calc`` prints, from parsed arguments; raises CalcInputError."""
    given_fulcrum = _length(args, "fulcrum")
    fulcrum = FULCRUM_14_IN if given_fulcrum is None else given_fulcrum
    u = _uncertainty(args)
    method = _method(args)
    try:
        bench, build, change = _bench(args, method, u, fulcrum)
        club = club_numbers(bench)
    except StaticsError as err:
        raise CalcInputError(f"{_METHODS[method].options}: {err}") from None
    length_in = build.length_in if build else _length(args, "length")
    if length_in is not None and not 0.0 < club.balance_point_in < length_in:
        raise CalcInputError(
            f"--length: a club {length_in:g} in long cannot balance {club.balance_point_in:.2f} in "
            "from the butt; check --length and the readings"
        )
    m12 = bench.propagate(lambda s: moment_12in_oz_in(s.total_weight_g, s.balance_point_in))

    correction = None
    target_label = None
    at = None
    at_default = None
    if args.target is not None:
        try:
            target_points = points_from_label(args.target)
            target_label = label_from_points(target_points, label_decimals(args.target))
        except (SwingweightLabelError, SwingweightRangeError) as err:
            raise CalcInputError(f"--target: {err}") from None
        at_in = _length(args, "at")
        if at_in is not None and length_in is not None and not 0.0 <= at_in <= length_in:
            raise CalcInputError(f"--at: {at_in:g} in is off a club {length_in:g} in long")
        # A position read off the club (--at, or the head found from --length) carries the
        # position uncertainty; the built-in default is an assumption, not a reading.
        at_u = u.position_in
        if at_in is None:
            if length_in is not None:
                at_in = length_in - DEFAULT_HEAD_CG_FROM_END_IN
                at_default = f"the head: {DEFAULT_HEAD_CG_FROM_END_IN:g} in short of the length"
            else:
                at_in, at_u = DEFAULT_CORRECTION_AT_IN, 0.0
                at_default = "default: a mid-iron head; give --at or --length"
        position = UncertainValue(at_in, at_u)
        at = Reported(at_in, expanded(at_u) if position.has_u else None)
        try:
            correction = correction_numbers(bench, target_points, position)
        except (CorrectionError, SwingweightRangeError) as err:
            raise CalcInputError(f"--target/--at: {err}") from None

    return CalcResult(
        method=method,
        fulcrum_in=fulcrum,
        club=club,
        bench=bench,
        moment_12in_oz_in=Reported(m12.value, bench.report_u(m12)),
        correction=correction,
        target_label=target_label,
        correction_at=at,
        correction_at_default=at_default,
        moi_g_in2=_moi(args, bench, u),
        length_change=change,
        build=build,
    )


def _moi(args: argparse.Namespace, bench: BenchInputs, u: InputUncertainty) -> Reported | None:
    """MOI about the butt from --period/--pivot, or None when neither is given."""
    if args.period is None and args.pivot is None:
        return None
    _require(args, "an MOI from a pendulum", "period", "pivot")
    period = _need(_number(args, "period", "a period in seconds such as 1.83"), "period")
    period_u = _non_negative("--period-u", _number(args, "period_u", "a time in seconds"))
    amplitude = _number(args, "amplitude", "an amplitude in degrees") or 0.0
    if not 0.0 <= amplitude < 90.0:
        raise CalcInputError(
            f"--amplitude: {amplitude:g} is not a swing amplitude of 0 to below 90 degrees"
        )
    gravity = _number(args, "gravity", "an acceleration in m/s^2 such as 9.806")
    try:
        value, moi_u = moi_about_butt_numbers(
            bench,
            u.position(_need_length(args, "pivot")),
            UncertainValue(period, period_u),
            amplitude_rad=math.radians(amplitude),
            gravity_m_s2=STANDARD_GRAVITY_M_S2 if gravity is None else gravity,
        )
    except PendulumError as err:
        raise CalcInputError(f"--period/--pivot: {err}") from None
    return Reported(value, moi_u)


# --- output -------------------------------------------------------------------------------------


def _put(out: dict[str, object], key: str, value: float, u: float | None) -> None:
    out[key] = value
    if u is not None:
        out[f"{key}_u"] = u


def result_as_json(result: CalcResult) -> dict[str, object]:
    """The ``--json`` document: unit-suffixed keys, and ``<key>_u`` (k = 2) beside each value
    whose inputs carry an uncertainty."""
    c = result.club
    out: dict[str, object] = {"method": result.method, "fulcrum_in": result.fulcrum_in}
    for key, value in c.as_dict().items():
        if isinstance(value, float):
            _put(out, key, value, getattr(c, f"{key}_u", None))
        elif not key.endswith("_u"):
            out[key] = value  # the label
    out["swingweight_in_range"] = points_in_range(c.swingweight_points)
    _put(out, "moment_12in_oz_in", result.moment_12in_oz_in.value, result.moment_12in_oz_in.u)
    if result.correction is not None and result.correction_at is not None:
        k = result.correction
        corr = k.correction
        out["target_swingweight"] = result.target_label
        out["target_swingweight_points"] = corr.target_points
        _put(out, "correction_g", corr.mass_g, k.mass_g_u)
        _put(out, "correction_at_in", corr.position_in, result.correction_at.u)
        _put(out, "corrected_total_weight_g", corr.corrected_total_weight_g,
             k.corrected_total_weight_g_u)  # fmt: skip
        _put(out, "corrected_balance_point_in", corr.corrected_balance_point_in,
             k.corrected_balance_point_in_u)  # fmt: skip
    if result.moi_g_in2 is not None:
        moi = result.moi_g_in2
        _put(out, "moi_butt_g_in2", moi.value, moi.u)
        _put(out, "moi_butt_kg_cm2", g_in2_to_kg_cm2(moi.value),
             None if moi.u is None else g_in2_to_kg_cm2(moi.u))  # fmt: skip
    if result.length_change is not None:
        delta, end, before = result.length_change
        out["length_change_in"] = delta
        out["length_change_at"] = end
        out["swingweight_points_change"] = c.swingweight_points - before
    if result.build is not None:
        out["length_in"] = result.build.length_in
    return out


def uncertainty_text(u: float, value_decimals: int) -> str:
    """``u`` to two significant digits (GUM 7.2.6), never to fewer decimals than its value."""
    if u <= 0:
        return f"{0:.{value_decimals}f}"
    two_significant = max(0, 1 - math.floor(math.log10(u)))
    return f"{u:.{max(value_decimals, two_significant)}f}"


class _Text:
    """Writes the text block; remembers whether any ± was shown so the footnote is only there
    when it explains something."""

    def __init__(self, stream: TextIO) -> None:
        self.stream = stream
        self.showed_u = False

    def line(self, text: str) -> None:
        self.stream.write(text + "\n")

    def pm(self, u: float | None, value_decimals: int, unit: str) -> str:
        """`` ± U unit`` or nothing when the value's inputs carry no uncertainty."""
        if u is None:
            return ""
        self.showed_u = True
        return f" ± {uncertainty_text(u, value_decimals)} {unit}"


def print_human(result: CalcResult, stream: TextIO) -> None:
    """A short block readable at the bench."""
    c = result.club
    t = _Text(stream)
    t.line(_METHODS[result.method].title)
    t.line(
        f"  total weight   {c.total_weight_g:8.1f} g{t.pm(c.total_weight_g_u, 1, 'g')}"
        f"   ({g_to_oz(c.total_weight_g):.2f} oz)"
    )
    t.line(
        f"  balance point  {c.balance_point_in:8.2f} in{t.pm(c.balance_point_in_u, 2, 'in')}"
        f"   ({in_to_mm(c.balance_point_in):.0f} mm from the butt)"
    )
    t.line(
        f"  moment @{result.fulcrum_in:g} in {c.moment_g_in:7.0f} g*in"
        f"{t.pm(c.moment_g_in_u, 0, 'g*in')}   ({c.moment_oz_in:.1f} oz*in)"
    )
    if points_in_range(c.swingweight_points):
        note = f"   ({c.swingweight_points:.2f} points, A0 = 0)"
    else:
        note = f"   OUT OF RANGE: {c.swingweight_points:.1f} points, the scale runs A0..G10"
    sw_u = t.pm(c.swingweight_points_u, 1, "points")
    t.line(f"  swing weight   {c.swingweight:>8}{sw_u}{note}")
    if result.length_change is not None:
        delta, end, before = result.length_change
        t.line(
            f"  length change  {delta:+.2f} in at the {end}: "
            f"{c.swingweight_points - before:+.1f} points"
        )
    if result.moi_g_in2 is not None:
        moi = result.moi_g_in2
        t.line(
            f"  MOI about butt {moi.value:8.0f} g*in^2{t.pm(moi.u, 0, 'g*in^2')}"
            f"   ({g_in2_to_kg_cm2(moi.value):.0f} kg*cm^2)"
        )
    if result.correction is not None and result.correction_at is not None:
        k = result.correction
        corr = k.correction
        verb = "add" if corr.mass_g >= 0 else "remove"
        where = f" ({result.correction_at_default})" if result.correction_at_default else ""
        t.line(
            f"Target {result.target_label}: {verb} {abs(corr.mass_g):.1f} g"
            f"{t.pm(k.mass_g_u, 1, 'g')} at {corr.position_in:.2f} in"
            f"{t.pm(result.correction_at.u, 2, 'in')}{where}"
        )
        t.line(
            f"  then           {corr.corrected_total_weight_g:8.1f} g"
            f"{t.pm(k.corrected_total_weight_g_u, 1, 'g')}, balance point "
            f"{corr.corrected_balance_point_in:.2f} in"
            f"{t.pm(k.corrected_balance_point_in_u, 2, 'in')}"
        )
    if t.showed_u:
        t.line("± values are expanded uncertainties (k = 2, about 95 %).")


def run(args: argparse.Namespace) -> int:
    try:
        result = calculate(args)
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
