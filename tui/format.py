"""Words and numbers as the dashboard prints them (pure functions, no widgets).

Every state that has a colour on screen also has a word here: colour is never the only signal.
"""

from __future__ import annotations

from dataclasses import dataclass

from heft.daemon.events import Alarm, AlarmKind, CaptureState, CaptureStateChanged
from heft.daemon.measurement import CheckResult, Measurement, Verdict
from heft.daemon.physics.swingweight import describe_points

VERDICT_WORDS: dict[Verdict, str] = {
    Verdict.PASS: "PASS",
    Verdict.NEAR_LIMIT: "NEAR LIMIT",
    Verdict.FAIL: "FAIL",
    Verdict.NO_SPEC: "NO SPEC",
}

# CSS class per verdict; the stylesheet gives each its colours.
VERDICT_CLASS: dict[Verdict, str] = {
    Verdict.PASS: "pass",
    Verdict.NEAR_LIMIT: "near",
    Verdict.FAIL: "fail",
    Verdict.NO_SPEC: "nospec",
}

CAPTURE_WORDS: dict[CaptureState, str] = {
    CaptureState.EMPTY: "EMPTY - ready, place a club",
    CaptureState.SETTLING: "SETTLING - hands off",
    CaptureState.CAPTURED: "CAPTURED",
    CaptureState.HOLDING: "HOLDING - lift the club to re-arm",
    CaptureState.UNSETTLED: "WILL NOT SETTLE - check the club and supports",
    CaptureState.OFFLINE: "OFFLINE - a device is not connected",
}

CHECK_NAMES: dict[str, str] = {
    "swingweight": "swing weight",
    "total_weight": "total weight",
    "balance_point": "balance point",
}

ALARM_KIND_WORDS: dict[AlarmKind, str] = {
    AlarmKind.OUT_OF_SPEC: "club out of spec",
    AlarmKind.DEVICE_OFFLINE: "device offline",
    AlarmKind.OVERLOAD: "overload",
    AlarmKind.WILL_NOT_SETTLE: "will not settle",
    AlarmKind.ZERO_OUT_OF_RANGE: "zero out of range",
    AlarmKind.NEEDS_ZERO: "needs zeroing",
    AlarmKind.CALIBRATION_DUE: "calibration due",
    AlarmKind.CALIBRATION_OVERDUE: "calibration overdue",
    AlarmKind.STORAGE_FAILED: "storage failed",
}


def with_u(value: float | None, u: float | None, decimals: int, unit: str) -> str:
    """``'412.3 ± 0.4 g'``; ``'-'`` for no value; the ± part only when an uncertainty is known."""
    if value is None:
        return "-"
    text = f"{value:.{decimals}f}"
    if u is not None:
        text += f" ± {u:.{decimals}f}"
    return f"{text} {unit}".rstrip()


def sw_label(points: float) -> str:
    return describe_points(points)


def check_value_text(check: CheckResult, value: float | None = None) -> str:
    """A check's value (or another value on the same scale) the way the trade reads it."""
    v = check.value if value is None else value
    if check.check == "swingweight":
        return sw_label(v)
    if check.check == "total_weight":
        return f"{v:.1f} g"
    if check.check == "balance_point":
        return f"{v:.2f} in"
    return f"{v:g}"


def check_sentence(check: CheckResult) -> str:
    """``'swing weight D3.1 above the band D1.5-D2.5 by 0.6 pt'`` and the like."""
    name = CHECK_NAMES.get(check.check, check.check)
    shown = check_value_text(check)
    if check.low is None or check.high is None:
        return f"{name} {shown}"
    band = f"{check_value_text(check, check.low)}-{check_value_text(check, check.high)}"
    unit = {"swingweight": "pt", "total_weight": "g", "balance_point": "in"}.get(check.check, "")
    if check.value > check.high:
        return f"{name} {shown} ABOVE {band} by {check.value - check.high:.2f} {unit}".rstrip()
    if check.value < check.low:
        return f"{name} {shown} BELOW {band} by {check.low - check.value:.2f} {unit}".rstrip()
    return f"{name} {shown} inside {band}"


@dataclass(frozen=True, slots=True)
class Banner:
    """The verdict banner: one word that cannot be missed, the reason, and a CSS class."""

    word: str
    reason: str
    css_class: str


def verdict_banner(m: Measurement | None, *, waiting: str = "") -> Banner:
    if m is None:
        return Banner("WAITING", waiting or "no club measured yet", "idle")
    who = f"#{m.seq}" + (f" {m.club}" if m.club else "") + (f" {m.club_id}" if m.club_id else "")
    failing = [c for c in m.checks if c.verdict is Verdict.FAIL]
    near = [c for c in m.checks if c.verdict is Verdict.NEAR_LIMIT]
    if failing:
        reason = "; ".join(check_sentence(c) for c in failing)
    elif near:
        reason = "; ".join(check_sentence(c) for c in near)
    elif m.checks:
        reason = "all checks inside the spec"
    else:
        reason = "no spec selected: stored, not judged"
    return Banner(VERDICT_WORDS[m.verdict], f"{who}: {reason}", VERDICT_CLASS[m.verdict])


READ_ONLY_HINT = "read-only: start heft dash with --commands to act"


def alarm_banner_text(active_unacknowledged: list[Alarm], *, can_acknowledge: bool = True) -> str:
    """Text of the alarm banner; empty when there is nothing to shout about.

    A read-only dashboard does not advertise the acknowledge key (it would do nothing).
    """
    if not active_unacknowledged:
        return ""
    first = active_unacknowledged[0]
    more = len(active_unacknowledged) - 1
    count = f" 1 of {more + 1}" if more else ""
    kind = ALARM_KIND_WORDS.get(first.kind, first.kind.value)
    # The key hint comes first: a long message is cut at the right edge, the hint never is.
    hint = " [a: acknowledge]" if can_acknowledge else " (read-only)"
    return f"ALARM{count}{hint}  {kind.upper()} - {first.source}: {first.message}"


def capture_text(capture: CaptureStateChanged, load_g: float | None) -> str:
    """The capture line: the state in words, with the load on the beam *now* while settling.

    The service's detail for SETTLING is the load when the placement was first detected, which
    is stale a moment later, so it is replaced by the current sum of the channels.
    """
    words = CAPTURE_WORDS[capture.state]
    if capture.state is CaptureState.SETTLING:
        return words + (f" (load {load_g:.1f} g)" if load_g is not None else "")
    return words + (f" ({capture.detail})" if capture.detail else "")


def alarm_state_word(alarm: Alarm) -> str:
    if not alarm.active:
        return "cleared"
    return "ACTIVE, acknowledged" if alarm.acknowledged else "ACTIVE"
