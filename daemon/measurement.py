"""The measurement record: what is stored, published on MQTT and printed by ``heft replay``.

One pydantic model serves all three so the payload, the database row and the JSON Schema in the
README can never drift apart. Field names carry their units.
"""

from __future__ import annotations

import enum
from datetime import datetime
from uuid import UUID

from pydantic import BaseModel, ConfigDict, Field


class Verdict(enum.StrEnum):
    PASS = "pass"
    NEAR_LIMIT = "near_limit"  # inside the spec but within the warning margin of a limit
    FAIL = "fail"
    NO_SPEC = "no_spec"  # no active spec: stored, not judged


class CheckResult(BaseModel):
    """One spec check (swing weight, total weight, balance point)."""

    model_config = ConfigDict(frozen=True)

    check: str = Field(description="swingweight | total_weight | balance_point")
    verdict: Verdict
    value: float
    low: float | None = None
    high: float | None = None
    message: str = ""


class ChannelWindow(BaseModel):
    """Statistics of the stable window a capture was taken from, per channel."""

    model_config = ConfigDict(frozen=True)

    channel: str = Field(description="'<device>/<channel index>'")
    mean_g: float
    stdev_g: float
    n: int
    t_start_s: float
    t_end_s: float
    calibration_id: str | None = None


class Measurement(BaseModel):
    """One captured club."""

    model_config = ConfigDict(frozen=True)

    id: UUID
    station: str
    seq: int = Field(description="per-station sequence number, 1-based, never reused")
    time_utc: datetime
    t: float | None = Field(
        default=None, description="capture time on the source clock (replay: the recording's)"
    )
    club_id: str | None = None
    job: str | None = None
    spec: str | None = None
    club: str | None = Field(
        default=None, description="club of the set the spec applied, e.g. '7i'"
    )
    total_weight_g: float
    total_weight_g_u: float | None = None
    balance_point_in: float
    balance_point_in_u: float | None = None
    moment_g_in: float
    moment_g_in_u: float | None = None
    moment_oz_in: float
    moment_oz_in_u: float | None = None
    swingweight: str = Field(description="Lorythmic label, e.g. 'D1.4'")
    swingweight_points: float = Field(description="Lorythmic points, A0 = 0, D0 = 30")
    swingweight_points_u: float | None = None
    channels: list[ChannelWindow] = Field(default_factory=list)
    calibration_ids: list[str] = Field(default_factory=list)
    verdict: Verdict = Verdict.NO_SPEC
    checks: list[CheckResult] = Field(default_factory=list)
    software_version: str
    operator: str | None = Field(
        default=None, description="operator who signed the command that completed it"
    )
