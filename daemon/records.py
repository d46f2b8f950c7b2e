"""Records kept beside measurements: channel calibrations (ISO/IEC 17025 style)."""

from __future__ import annotations

from datetime import date, datetime

from pydantic import BaseModel, ConfigDict, Field


class ReferenceMass(BaseModel):
    """The reference weight a span or verification used (OIML R 111 class, identity)."""

    model_config = ConfigDict(frozen=True)

    mass_g: float = Field(gt=0)
    weight_class: str = Field(default="M1", description="OIML R 111 class, e.g. F2, M1")
    weight_id: str = Field(default="", description="the weight's own identity / certificate no.")


class CalibrationRecord(BaseModel):
    """One calibration event of one load-cell channel.

    ``counts_per_g`` and ``zero_counts`` turn raw ADC counts into grams:
    grams = (counts - zero_counts) / counts_per_g.
    """

    model_config = ConfigDict(frozen=True)

    id: str = Field(description="unique id, e.g. a UUID4 string")
    station: str
    channel: str = Field(description="'<device>/<channel index>'")
    kind: str = Field(description="zero | span | verify")
    time_utc: datetime
    zero_counts: float
    counts_per_g: float
    reference: ReferenceMass | None = None
    result_g: float | None = Field(
        default=None, description="what the channel read on the reference"
    )
    residual_g: float | None = Field(default=None, description="result minus the reference value")
    passed: bool = True
    next_due: date | None = None
    device_model: str = ""
    device_firmware: str = ""
    device_serial: str = ""
    operator: str = ""
    note: str = ""
