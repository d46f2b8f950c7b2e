"""Judge a captured club against a spec: pass, near the limit, or fail, check by check (pure).

Each check is a band [low, high]. A value outside the band fails. A value inside it but within
``near_limit_fraction`` of the half-width from either edge is "near limit": still acceptable,
but worth a look before the club leaves the bench. The overall verdict is the worst check.
"""

from __future__ import annotations

from dataclasses import dataclass

from daemon.config import ClubTarget, LengthRange, MassRange, SpecConfig
from daemon.measurement import CheckResult, Verdict
from daemon.physics.swingweight import describe_points, points_from_label

_ORDER = {Verdict.NO_SPEC: 0, Verdict.PASS: 1, Verdict.NEAR_LIMIT: 2, Verdict.FAIL: 3}


@dataclass(frozen=True, slots=True)
class SpecJudgement:
    verdict: Verdict
    checks: list[CheckResult]

    @property
    def failed(self) -> list[CheckResult]:
        return [c for c in self.checks if c.verdict is Verdict.FAIL]


def judge_band(
    check: str, value: float, low: float, high: float, near_fraction: float, shown: str
) -> CheckResult:
    """One band check; ``shown`` is the value as people read it (``'D2.6'``, ``'402.1 g'``)."""
    margin = near_fraction * (high - low) / 2.0
    if value < low:
        verdict, where = Verdict.FAIL, f"below the low limit by {low - value:.3g}"
    elif value > high:
        verdict, where = Verdict.FAIL, f"above the high limit by {value - high:.3g}"
    elif value < low + margin or value > high - margin:
        verdict, where = Verdict.NEAR_LIMIT, "inside, near a limit"
    else:
        verdict, where = Verdict.PASS, "inside"
    return CheckResult(
        check=check,
        verdict=verdict,
        value=value,
        low=low,
        high=high,
        message=f"{check} {shown}: {where}",
    )


def effective_target(spec: SpecConfig, club: str | None) -> ClubTarget:
    """The spec's targets with the club's own overrides applied."""
    base = ClubTarget(
        swingweight=spec.swingweight,
        tolerance_points=spec.tolerance_points,
        total_weight=spec.total_weight,
        balance_point=spec.balance_point,
    )
    if club is None or club not in spec.clubs:
        return base
    own = spec.clubs[club]
    return ClubTarget(
        swingweight=own.swingweight if own.swingweight is not None else base.swingweight,
        tolerance_points=(
            own.tolerance_points if own.tolerance_points is not None else base.tolerance_points
        ),
        total_weight=own.total_weight if own.total_weight is not None else base.total_weight,
        balance_point=own.balance_point if own.balance_point is not None else base.balance_point,
    )


def judge(
    spec: SpecConfig | None,
    club: str | None,
    *,
    total_weight_g: float,
    balance_point_in: float,
    swingweight_points: float,
) -> SpecJudgement:
    """Every check the spec (and the club's overrides) defines; NO_SPEC when there is none."""
    if spec is None:
        return SpecJudgement(Verdict.NO_SPEC, [])
    target = effective_target(spec, club)
    near = spec.near_limit_fraction
    checks: list[CheckResult] = []
    if target.swingweight is not None:
        centre = points_from_label(target.swingweight)
        tol = target.tolerance_points or spec.tolerance_points
        checks.append(
            judge_band(
                "swingweight",
                swingweight_points,
                centre - tol,
                centre + tol,
                near,
                f"{describe_points(swingweight_points)} (target {target.swingweight} +/- {tol:g})",
            )
        )
    mass_range: MassRange | None = target.total_weight
    if mass_range is not None:
        checks.append(
            judge_band(
                "total_weight",
                total_weight_g,
                mass_range.min_g,
                mass_range.max_g,
                near,
                f"{total_weight_g:.1f} g",
            )
        )
    bp_range: LengthRange | None = target.balance_point
    if bp_range is not None:
        checks.append(
            judge_band(
                "balance_point",
                balance_point_in,
                bp_range.min_in,
                bp_range.max_in,
                near,
                f"{balance_point_in:.2f} in",
            )
        )
    if not checks:
        return SpecJudgement(Verdict.NO_SPEC, [])
    verdict = max((c.verdict for c in checks), key=_ORDER.__getitem__)
    return SpecJudgement(verdict, checks)
