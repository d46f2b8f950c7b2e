"""A fixed, deterministic session at an invented bench, for tests, snapshots and screenshots.

Larkspur Clubworks, station "bench-1", job "LK-2417" (a set of irons 4i-PW to D2 +/- 0.5).
The numbers are made up but consistent: support readings come from the club's weight and balance
point by statics, and every measurement goes through the real physics and spec code.
"""

from __future__ import annotations

import random
import uuid
from dataclasses import dataclass
from datetime import UTC, datetime, timedelta

from heft.daemon.config import ClubTarget, MassRange, SpecConfig
from heft.daemon.events import (
    Alarm,
    AlarmChanged,
    AlarmKind,
    CaptureState,
    CaptureStateChanged,
    DeviceStatus,
    Event,
    LiveReading,
    MeasurementCaptured,
)
from heft.daemon.measurement import ChannelWindow, Measurement, Verdict
from heft.daemon.physics.club import club_from_two_supports
from heft.daemon.physics.swingweight import moment_g_in_from_points
from heft.daemon.physics.uncertainty import UncertainValue
from heft.daemon.specs import judge
from heft.drivers.reading import Flag

STATION = "bench-1"
JOB = "LK-2417"
SPEC = "lk-irons-d2"
JOBS = (JOB, "LK-2418", "QC-sample")
BUTT_SUPPORT_IN = 4.0
HEAD_SUPPORT_IN = 36.0
CHANNELS = ("beam/0", "beam/1")
START_UTC = datetime(2026, 3, 14, 9, 0, tzinfo=UTC)
START_MONO_S = 1000.0
SAMPLE_PERIOD_S = 1 / 80

# club -> (total weight in g, swing-weight points actually built). 7i is heavy in the head (fail),
# 8i sits near the upper limit.
BUILT: dict[str, tuple[float, float]] = {
    "4i": (409.6, 32.1),
    "5i": (416.2, 31.8),
    "6i": (423.1, 32.2),
    "7i": (430.4, 33.1),
    "8i": (436.8, 32.47),
    "9i": (443.0, 31.9),
    "PW": (449.7, 32.0),
}
NOMINAL_WEIGHT_G: dict[str, float] = {
    "4i": 410.0, "5i": 416.5, "6i": 423.0, "7i": 429.5, "8i": 436.0, "9i": 442.5, "PW": 449.0,
}


def spec() -> SpecConfig:
    """The set's spec: D2 +/- 0.5 points, each club's weight within 3 g of its nominal."""
    return SpecConfig(
        swingweight="D2",
        tolerance_points=0.5,
        clubs={
            club: ClubTarget(total_weight=MassRange(min_g=w - 3.0, max_g=w + 3.0))
            for club, w in NOMINAL_WEIGHT_G.items()
        },
    )


@dataclass
class _Clock:
    mono_s: float = START_MONO_S

    def tick(self, seconds: float = SAMPLE_PERIOD_S) -> float:
        self.mono_s += seconds
        return self.mono_s


def support_readings_g(weight_g: float, points: float) -> tuple[float, float]:
    """Butt- and head-support readings for a club of this weight and swing weight (statics)."""
    balance_point_in = 14.0 + moment_g_in_from_points(points) / weight_g
    head_g = weight_g * (balance_point_in - BUTT_SUPPORT_IN) / (HEAD_SUPPORT_IN - BUTT_SUPPORT_IN)
    return weight_g - head_g, head_g


def make_measurement(seq: int, club: str, weight_g: float, points: float) -> Measurement:
    """A measurement as the service would make it, through the real physics and spec code."""
    butt_g, head_g = support_readings_g(weight_g, points)
    numbers = club_from_two_supports(
        UncertainValue(butt_g, 0.05),
        UncertainValue(BUTT_SUPPORT_IN, 0.01),
        UncertainValue(head_g, 0.05),
        UncertainValue(HEAD_SUPPORT_IN, 0.01),
    )
    judged = judge(
        spec(),
        club,
        total_weight_g=numbers.total_weight_g,
        balance_point_in=numbers.balance_point_in,
        swingweight_points=numbers.swingweight_points,
    )
    t = START_MONO_S + 20.0 * seq
    return Measurement(
        id=uuid.UUID(int=seq),
        station=STATION,
        seq=seq,
        time_utc=START_UTC + timedelta(seconds=20 * seq),
        t=t,
        club_id=f"LK2417-{club}",
        job=JOB,
        spec=SPEC,
        club=club,
        channels=[
            ChannelWindow(channel=CHANNELS[0], mean_g=butt_g, stdev_g=0.04, n=32,
                          t_start_s=t - 0.4, t_end_s=t, calibration_id="cal-beam0-0311"),
            ChannelWindow(channel=CHANNELS[1], mean_g=head_g, stdev_g=0.05, n=32,
                          t_start_s=t - 0.4, t_end_s=t, calibration_id="cal-beam1-0311"),
        ],
        calibration_ids=["cal-beam0-0311", "cal-beam1-0311"],
        verdict=judged.verdict,
        checks=judged.checks,
        software_version="0.1.0",
        **numbers.as_dict(),
    )


def _placement(
    clock: _Clock, rng: random.Random, butt_g: float, head_g: float, samples: int
) -> list[Event]:
    """Live readings of both channels as a club is laid down and settles (damped)."""
    events: list[Event] = []
    for i in range(samples):
        t = clock.tick()
        settle = 0.5 ** (i / 3)
        for channel, target in zip(CHANNELS, (butt_g, head_g), strict=True):
            wobble = settle * target * 0.05 * (1 if i % 2 else -1)
            value = target + wobble + rng.gauss(0.0, 0.04)
            flags = Flag.STABLE if settle < 0.05 else Flag.MOTION
            events.append(LiveReading(station=STATION, channel=channel, t_mono_s=t,
                                      value_g=round(value, 2), flags=flags))
    return events


def _alarm(kind: AlarmKind, source: str, active: bool, message: str, seq: int) -> AlarmChanged:
    when = START_UTC + timedelta(seconds=20 * seq + 1)
    return AlarmChanged(alarm=Alarm(station=STATION, kind=kind, source=source, active=active,
                                    message=message, time_utc=when))


def _capture(state: CaptureState, clock: _Clock) -> CaptureStateChanged:
    return CaptureStateChanged(station=STATION, state=state, t_mono_s=clock.tick())


def session_events(clubs: int = len(BUILT), samples_per_club: int = 24) -> list[Event]:
    """The whole session: devices come up, ``clubs`` clubs are placed, judged and lifted."""
    rng = random.Random(2417)
    clock = _Clock()
    events: list[Event] = [
        DeviceStatus(station=STATION, device="beam", connected=True, port="/dev/heft-beam",
                     sample_rate_hz=80.0, frame_errors=0, model="LK-beam2", firmware="1.3.0"),
        DeviceStatus(station=STATION, device="scan", connected=False, port="/dev/heft-scan",
                     frame_errors=3, model="hand scanner"),
        _alarm(AlarmKind.DEVICE_OFFLINE, "scan", True,
               "scan on /dev/heft-scan: no data for 2 s; retrying", 0),
        _alarm(AlarmKind.CALIBRATION_DUE, "beam/1", True,
               "beam/1 calibration due in 5 days (2026-03-19)", 0),
        CaptureStateChanged(station=STATION, state=CaptureState.EMPTY, t_mono_s=clock.tick()),
    ]
    out_of_spec = False
    for seq, (club, (weight_g, points)) in enumerate(list(BUILT.items())[:clubs], start=1):
        butt_g, head_g = support_readings_g(weight_g, points)
        events.append(_capture(CaptureState.SETTLING, clock))
        events += _placement(clock, rng, butt_g, head_g, samples_per_club)
        m = make_measurement(seq, club, weight_g, points)
        events.append(_capture(CaptureState.CAPTURED, clock))
        events.append(MeasurementCaptured(measurement=m))
        if (m.verdict is Verdict.FAIL) != out_of_spec:
            out_of_spec = not out_of_spec
            what = "out of spec" if out_of_spec else "in spec again"
            events.append(_alarm(AlarmKind.OUT_OF_SPEC, "station", out_of_spec,
                                 f"#{seq} {club} {what}", seq))
        events.append(_capture(CaptureState.HOLDING, clock))
        if seq < clubs:
            for channel in CHANNELS:
                events.append(LiveReading(station=STATION, channel=channel, t_mono_s=clock.tick(),
                                          value_g=0.01, flags=Flag.STABLE))
            events.append(_capture(CaptureState.EMPTY, clock))
    events.append(
        DeviceStatus(station=STATION, device="beam", connected=True, port="/dev/heft-beam",
                     sample_rate_hz=80.0, frame_errors=0,
                     last_value=round(support_readings_g(*list(BUILT.values())[clubs - 1])[1], 2),
                     last_t_mono_s=clock.mono_s, model="LK-beam2", firmware="1.3.0")
    )
    return events


def out_of_spec_event(seq: int = 99) -> MeasurementCaptured:
    """One more club, built 1.2 points heavy: the FAIL a test waits for."""
    return MeasurementCaptured(measurement=make_measurement(seq, "7i", 430.0, 33.7))
