"""Judge a captured club against a spec: pass, near the limit, or fail, check by check (pure).

Each check is a band [low, high]. A value outside the band fails. A value inside it but within
``near_limit_fraction`` of the half-width from either edge is "near limit": still acceptable,
but worth a look before the club leaves the bench. The overall verdict is the worst check.
"""

from __future__ import annotations

from dataclasses import dataclass

from heft.daemon.config import ClubTarget, LengthRange, MassRange, SpecConfig
from heft.daemon.measurement import CheckResult, Verdict
from heft.daemon.physics.swingweight import describe_points, points_from_label

_ORDER = {Verdict.NO_SPEC: 0, Verdict.PASS: 1, Verdict.NEAR_LIMIT: 2, Verdict.FAIL: 3}


@dataclass(frozen=True, slots=True)
class SpecJudgement:
    verdict: Verdict
    checks: list[CheckResult]

    @property
    def failed(self) -> list[CheckResult]:
        return [c for c in self.checks if c.verdict is Verdict.FAIL]


# How each check is named in messages (the check ids stay as they are in stored records).
CHECK_NAMES: dict[str, str] = {
    "swingweight": "swing weight",
    "total_weight": "total weight",
    "balance_point": "balance point",
}


def judge_band(
    check: str,
    value: float,
    low: float,
    high: float,
    near_fraction: float,
    shown: str,
    *,
    band: str,
    unit: str,
) -> CheckResult:
    """One band check.

    The message puts the essential words first, short enough for a one-line alarm banner:
    ``'swing weight D3.7: 1.2 points over the limit (D2 ± 0.5)'``.

    Args:
        shown: The value as people read it (``'D2.6'``, ``'402.1 g'``).
        band: The band as people read it (``'D2 ± 0.5'``, ``'400 to 430 g'``).
        unit: Unit of the excess over a limit (``'points'``, ``'g'``, ``'in'``).
    """
    margin = near_fraction * (high - low) / 2.0
    if value < low:
        verdict, where = Verdict.FAIL, f"{low - value:.3g} {unit} under the limit"
    elif value > high:
        verdict, where = Verdict.FAIL, f"{value - high:.3g} {unit} over the limit"
    elif value < low + margin or value > high - margin:
        verdict, where = Verdict.NEAR_LIMIT, "near the limit"
    else:
        verdict, where = Verdict.PASS, "in spec"
    return CheckResult(
        check=check,
        verdict=verdict,
        value=value,
        low=low,
        high=high,
        message=f"{CHECK_NAMES.get(check, check)} {shown}: {where} ({band})",
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
                describe_points(swingweight_points),
                band=f"{target.swingweight} ± {tol:g}",
                unit="points",
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
                band=f"{mass_range.min_g:g} to {mass_range.max_g:g} g",
                unit="g",
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
                band=f"{bp_range.min_in:g} to {bp_range.max_in:g} in",
                unit="in",
            )
        )
    if not checks:
        return SpecJudgement(Verdict.NO_SPEC, [])
    verdict = max((c.verdict for c in checks), key=_ORDER.__getitem__)
    return SpecJudgement(verdict, checks)
