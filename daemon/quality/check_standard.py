"""Is the station's check standard still in control, and since when are measurements suspect?

ISO/IEC 17025:2017, clause 7.7 (ensuring the validity of results), asks a laboratory to monitor
the validity of its results, recorded so that trends can be seen, and lists among the means the
use of check or working standards with control charts (7.7.1; item wording from memory). A
check standard is a reference object of known value measured at a regular interval (each shift,
each morning); when it goes out of control, the measurements made since the last check that was
in control are suspect and must be reviewed.

Two ways to judge a check reading, chosen by the caller:

``check_by_acceptance``: |reading - known| against the acceptance limit
    U_c = sqrt(U_ref^2 + U_reading^2), the combined expanded uncertainty of the reference value
    and of one station reading (both at the same coverage, usually k = 2). Equivalent to the
    normalised error E_n = |reading - known| / U_c <= 1 (ISO 13528:2015, E_n numbers; clause
    from memory). A reading exactly on the limit passes.

``check_by_chart``: an individuals chart centred on the known value, sigma either given or
    taken from a baseline of the first check readings (MR-bar / d2, ``heft.daemon.quality.imr``),
    with run rules (default 1, 2, 3, 5, 6: a point beyond 3 sigma, a shift to one side, a trend,
    and the 2-of-3 and 4-of-5 signals of a shift; 4, 7 and 8 speak of over-adjustment and mixed
    streams in a process, and can be chosen).

When the latest reading is out of control the suspect stretch is traced back: for the chart,
every pattern that breaks a rule at the trailing run of flagged readings counts from its first
point (nine readings on one side mean the bias began nine checks ago, not at the ninth).
``last_good_index`` is the check just before that stretch: measurements taken after it are
suspect; None means no check before the stretch was good (suspect since the first reading).
"""

from __future__ import annotations

import math
from collections.abc import Iterable
from dataclasses import dataclass

from heft.daemon.quality.imr import ImrLimits
from heft.daemon.quality.inputs import QualityInputError, finite_number, finite_series
from heft.daemon.quality.run_rules import RuleBreak, check_rules, rule_breaks

CHART_RULES_DEFAULT: tuple[int, ...] = (1, 2, 3, 5, 6)


@dataclass(frozen=True, slots=True)
class CheckStatus:
    in_control: bool  # the latest reading
    latest_index: int
    last_good_index: int | None  # latest when in control; see the module docstring
    reasons: tuple[str, ...]  # what put the latest reading out of control, in words

    @property
    def suspect_from_index(self) -> int | None:
        """First check reading of the suspect stretch (None when in control)."""
        if self.in_control:
            return None
        return 0 if self.last_good_index is None else self.last_good_index + 1


@dataclass(frozen=True, slots=True)
class AcceptanceCheck:
    status: CheckStatus
    acceptance_limit: float  # U_c, same unit as the readings
    normalised_errors: tuple[float, ...]  # E_n of every reading


def _trailing_bad(bad: list[bool]) -> int:
    """Index of the first reading in the run of bad readings that ends at the latest."""
    start = len(bad)
    while start > 0 and bad[start - 1]:
        start -= 1
    return start


def check_by_acceptance(
    known_value: float,
    known_expanded_uncertainty: float,
    reading_expanded_uncertainty: float,
    readings: Iterable[float],
) -> AcceptanceCheck:
    known = finite_number("known_value", known_value)
    u_ref = finite_number("known_expanded_uncertainty", known_expanded_uncertainty)
    u_read = finite_number("reading_expanded_uncertainty", reading_expanded_uncertainty)
    if u_ref < 0 or u_read < 0 or u_ref == u_read == 0:
        raise QualityInputError(
            "known_expanded_uncertainty, reading_expanded_uncertainty: expected zero or more, "
            f"not both zero; got {u_ref} and {u_read}"
        )
    series = finite_series("readings", readings, minimum=1)
    limit = math.hypot(u_ref, u_read)
    errors = tuple(abs(r - known) / limit for r in series)
    bad = [e > 1.0 for e in errors]
    latest = len(series) - 1
    if not bad[latest]:
        return AcceptanceCheck(CheckStatus(True, latest, latest, ()), limit, errors)
    start = _trailing_bad(bad)
    reason = (
        f"reading {series[latest]:g} differs from the known value {known:g} by "
        f"{abs(series[latest] - known):.4g}, more than the acceptance limit {limit:.4g} "
        f"(E_n {errors[latest]:.2f})"
    )
    status = CheckStatus(False, latest, start - 1 if start > 0 else None, (reason,))
    return AcceptanceCheck(status, limit, errors)


@dataclass(frozen=True, slots=True)
class ChartCheck:
    status: CheckStatus
    limits: ImrLimits
    breaks: tuple[RuleBreak, ...]  # every break in the series


def chart_limits(
    known: float, series: tuple[float, ...], sigma: float | None, baseline_count: int | None
) -> ImrLimits:
    if sigma is not None:
        return ImrLimits.given(known, sigma)
    if baseline_count is None:
        raise QualityInputError("sigma, baseline_count: give the chart's sigma or a baseline")
    if not 2 <= baseline_count <= len(series):
        raise QualityInputError(
            f"baseline_count: expected 2 to {len(series)} readings, got {baseline_count}"
        )
    return ImrLimits.from_baseline(series[:baseline_count], centre=known)


def check_by_chart(
    known_value: float,
    readings: Iterable[float],
    *,
    sigma: float | None = None,
    baseline_count: int | None = None,
    rules: Iterable[int] = CHART_RULES_DEFAULT,
) -> ChartCheck:
    known = finite_number("known_value", known_value)
    series = finite_series("readings", readings, minimum=1)
    limits = chart_limits(known, series, sigma, baseline_count)
    breaks = tuple(rule_breaks(series, limits, check_rules(rules)))
    latest = len(series) - 1
    at_latest = [b for b in breaks if b.index == latest]
    if not at_latest:
        return ChartCheck(CheckStatus(True, latest, latest, ()), limits, breaks)
    flagged = {b.index for b in breaks}
    start = _trailing_bad([i in flagged for i in range(len(series))])
    earliest = min(p for b in breaks if b.index >= start for p in b.points)
    while earliest > 0 and earliest - 1 in flagged:  # a pattern reaching back into older flags
        earliest = min(p for b in breaks if b.index >= earliest - 1 for p in b.points)
    reasons = tuple(b.describe() for b in at_latest)
    status = CheckStatus(False, latest, earliest - 1 if earliest > 0 else None, reasons)
    return ChartCheck(status, limits, breaks)
