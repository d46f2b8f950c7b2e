"""What ``heft calc`` prints: a short text block for the bench, or a JSON document.

Not a sub-command of its own: ``heft.tui.commands.calc`` uses it.
"""

from __future__ import annotations

import math
from typing import TextIO

from heft.daemon.calc.compute import CalcResult
from heft.daemon.calc.requests import Method
from heft.daemon.physics.build_defaults import DEFAULT_HEAD_CG_FROM_END_IN
from heft.daemon.physics.swingweight import points_in_range
from heft.drivers.units import g_in2_to_kg_cm2, g_to_oz, in_to_mm

TITLES: dict[Method, str] = {
    "weight_balance": "Measured club",
    "supports": "Club on two supports",
    "lever": "Club on a lever beam",
    "parts": "Predicted club (from parts)",
}
# Why a correction sits where it does when nobody said (the text output's note).
AT_NOTES = {
    "head": f"the head: {DEFAULT_HEAD_CG_FROM_END_IN:g} in short of the length",
    "default": "default: a mid-iron head; give --at or --length",
}


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
    if result.correction is not None:
        k = result.correction.numbers
        corr = k.correction
        out["target_swingweight"] = result.correction.target_label
        out["target_swingweight_points"] = corr.target_points
        _put(out, "correction_g", corr.mass_g, k.mass_g_u)
        _put(out, "correction_at_in", corr.position_in, result.correction.at.u)
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
        change = result.length_change
        out["length_change_in"] = change.delta_in
        out["length_change_at"] = change.end
        out["swingweight_points_change"] = c.swingweight_points - change.points_before
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
    t.line(TITLES[result.method])
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
        change = result.length_change
        t.line(
            f"  length change  {change.delta_in:+.2f} in at the {change.end}: "
            f"{c.swingweight_points - change.points_before:+.1f} points"
        )
    if result.moi_g_in2 is not None:
        moi = result.moi_g_in2
        t.line(
            f"  MOI about butt {moi.value:8.0f} g*in^2{t.pm(moi.u, 0, 'g*in^2')}"
            f"   ({g_in2_to_kg_cm2(moi.value):.0f} kg*cm^2)"
        )
    if result.correction is not None:
        k = result.correction.numbers
        corr = k.correction
        verb = "add" if corr.mass_g >= 0 else "remove"
        note_at = AT_NOTES.get(result.correction.at_source)
        where = f" ({note_at})" if note_at else ""
        t.line(
            f"Target {result.correction.target_label}: {verb} {abs(corr.mass_g):.1f} g"
            f"{t.pm(k.mass_g_u, 1, 'g')} at {corr.position_in:.2f} in"
            f"{t.pm(result.correction.at.u, 2, 'in')}{where}"
        )
        t.line(
            f"  then           {corr.corrected_total_weight_g:8.1f} g"
            f"{t.pm(k.corrected_total_weight_g_u, 1, 'g')}, balance point "
            f"{corr.corrected_balance_point_in:.2f} in"
            f"{t.pm(k.corrected_balance_point_in_u, 2, 'in')}"
        )
    if t.showed_u:
        t.line("± values are expanded uncertainties (k = 2, about 95 %).")
