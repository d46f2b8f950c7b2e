"""Invented records for storage, MQTT and export tests (Larkspur Clubworks, demo data only)."""

from __future__ import annotations

import uuid
from datetime import UTC, datetime, timedelta

from heft.daemon.events import Alarm, AlarmKind
from heft.daemon.measurement import CheckResult, Measurement, Verdict
from heft.daemon.physics.swingweight import (
    label_from_points,
    moment_about_g_in,
    points_from_moment_g_in,
)
from heft.daemon.records import CalibrationRecord, ReferenceMass
from heft.drivers.units import g_in_to_oz_in

T0 = datetime(2026, 11, 30, 8, 0, tzinfo=UTC)


def make_measurement(
    seq: int,
    *,
    station: str = "bench-1",
    time_utc: datetime | None = None,
    job: str | None = "LC-2417",
    verdict: Verdict = Verdict.PASS,
    total_weight_g: float = 421.0,
    balance_point_in: float = 28.6,
) -> Measurement:
    """A self-consistent measurement: moment and swing weight follow from weight and balance."""
    moment_g_in = moment_about_g_in(total_weight_g, balance_point_in)
    points = points_from_moment_g_in(moment_g_in)
    checks = []
    if verdict is Verdict.FAIL:
        checks.append(
            CheckResult(
                check="swingweight",
                verdict=Verdict.FAIL,
                value=points,
                low=31.0,
                high=32.0,
                message="swing weight outside D1-D2",
            )
        )
    return Measurement(
        id=uuid.uuid4(),
        station=station,
        seq=seq,
        time_utc=time_utc or T0 + timedelta(seconds=seq),
        club_id=f"LCW-{seq:05d}",
        job=job,
        spec="larkspur-irons-d1" if job else None,
        club="7i",
        total_weight_g=total_weight_g,
        balance_point_in=balance_point_in,
        moment_g_in=moment_g_in,
        moment_oz_in=g_in_to_oz_in(moment_g_in),
        swingweight=label_from_points(points),
        swingweight_points=points,
        calibration_ids=["cal-beam-0-1"],
        verdict=verdict,
        checks=checks,
        software_version="0.1.0",
    )


def make_calibration(
    channel: str, kind: str, time_utc: datetime, *, counts_per_g: float = 412.5
) -> CalibrationRecord:
    return CalibrationRecord(
        id=str(uuid.uuid4()),
        station="bench-1",
        channel=channel,
        kind=kind,
        time_utc=time_utc,
        zero_counts=8123.0,
        counts_per_g=counts_per_g,
        reference=ReferenceMass(mass_g=500.0, weight_class="M1", weight_id="LCW-REF-500")
        if kind == "span"
        else None,
        device_model="beam-hx711",
        device_firmware="1.2.0",
        device_serial="LCW-B-0007",
        operator="mo",
    )


def make_alarm(
    kind: AlarmKind, source: str, active: bool, time_utc: datetime = T0, station: str = "bench-1"
) -> Alarm:
    return Alarm(
        station=station,
        kind=kind,
        source=source,
        active=active,
        message=f"{kind.value} on {source}" if active else f"{kind.value} on {source} cleared",
        time_utc=time_utc,
    )
