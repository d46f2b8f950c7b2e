"""From captured windows to a club's numbers and its Measurement record (pure).

The pipeline decides *when* a club is measured (a capture, or a pair of them); this module says
*what* the numbers are: each window's mean with its standard uncertainty, the geometry's statics
(heft.daemon.physics.club) and the record that carries them with the calibrations used.
"""

from __future__ import annotations

import math
import uuid
from collections.abc import Mapping
from datetime import datetime

from heft.daemon.capture import WindowStats
from heft.daemon.capture_params import CaptureParams
from heft.daemon.config import Geometry, LeverBeamGeometry, TwoSupportGeometry
from heft.daemon.measurement import ChannelWindow, Measurement
from heft.daemon.physics.club import (
    ClubNumbers,
    club_from_lever,
    club_from_two_supports,
    club_from_weight_and_balance,
)
from heft.daemon.physics.uncertainty import UncertainValue, combine_u, net_resolution_u
from heft.daemon.records import CalibrationRecord
from heft.daemon.specs import SpecJudgement
from heft.drivers.reading import ChannelRef

# Namespace of the deterministic measurement ids that replay gives (uuid5 of recording + seq).
REPLAY_NAMESPACE = uuid.UUID("6f1d3c52-4a8e-5b7e-9a51-2c3e7d1b0a94")


def measurement_id(replay_source: str | None, seq: int) -> uuid.UUID:
    """A new random id; in replay the same recording and seq always give the same id."""
    if replay_source is not None:
        return uuid.uuid5(REPLAY_NAMESPACE, f"{replay_source}#{seq}")
    return uuid.uuid4()


def reading_u(params: CaptureParams, channel: str, w: WindowStats) -> UncertainValue:
    """Window mean with its standard uncertainty: repeatability and the net resolution."""
    step = params.division_for(channel)
    repeat = w.stdev_g / math.sqrt(w.n) if w.n > 1 else 0.0
    return UncertainValue(w.mean_g, combine_u(repeat, net_resolution_u(step)))


def club_numbers(
    geometry: Geometry,
    params: CaptureParams,
    windows: Mapping[str, WindowStats],
    balance_point_in: float | None,
) -> ClubNumbers:
    """The club's weight, balance point, moment and swing weight from its windows.

    ``balance_point_in`` is the entered balance point (single-scale geometry only). Raises
    StaticsError when the windows are not a club (heft.daemon.physics.statics).
    """

    def u(ref: ChannelRef) -> UncertainValue:
        return reading_u(params, str(ref), windows[str(ref)])

    if isinstance(geometry, TwoSupportGeometry):
        return club_from_two_supports(
            u(geometry.channel_a),
            UncertainValue(geometry.position_a_in, geometry.position_u_in),
            u(geometry.channel_b),
            UncertainValue(geometry.position_b_in, geometry.position_u_in),
        )
    if isinstance(geometry, LeverBeamGeometry):
        return club_from_lever(
            u(geometry.force_channel),
            UncertainValue(geometry.lever_arm_in, geometry.lever_arm_u_in),
            u(geometry.weight_channel),
            fulcrum_in=geometry.fulcrum_in,
        )
    assert balance_point_in is not None
    return club_from_weight_and_balance(
        u(geometry.weight_channel),
        UncertainValue(balance_point_in, geometry.balance_point_u_in),
    )


def measurement_of(
    numbers: ClubNumbers,
    windows: Mapping[str, WindowStats],
    calibrations: Mapping[str, CalibrationRecord],
    *,
    id: uuid.UUID,
    station: str,
    seq: int,
    time_utc: datetime,
    t_s: float,
    club_id: str | None,
    job: str | None,
    spec: str | None,
    club: str | None,
    verdict: SpecJudgement,
    software_version: str,
) -> Measurement:
    """The record of one club; each window names the calibration its grams came from."""

    def calibration_id(channel: str) -> str | None:
        record = calibrations.get(channel)
        return record.id if record is not None else None

    channel_windows = [
        ChannelWindow(
            channel=ch,
            mean_g=w.mean_g,
            stdev_g=w.stdev_g,
            n=w.n,
            t_start_s=w.t_start_s,
            t_end_s=w.t_end_s,
            calibration_id=calibration_id(ch),
        )
        for ch, w in sorted(windows.items())
    ]
    return Measurement(
        id=id,
        station=station,
        seq=seq,
        time_utc=time_utc,
        t=t_s,
        club_id=club_id,
        job=job,
        spec=spec,
        club=club,
        **numbers.as_dict(),
        channels=channel_windows,
        calibration_ids=sorted({w.calibration_id for w in channel_windows if w.calibration_id}),
        verdict=verdict.verdict,
        checks=verdict.checks,
        software_version=software_version,
    )
