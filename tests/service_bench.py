"""Helpers for the service tests: station configs and simulated benches (invented demo data).

The clubs belong to the invented maker Larkspur Clubworks. A two-support beam device from the
simulator (``drivers/sim/definition_files/beam.json``: supports at 4 and 36 in, 80 samples/s)
is either run in pure code (bytes straight into a driver) or served on a real pty.
"""

from __future__ import annotations

import tomllib
from collections.abc import Iterator, Sequence
from dataclasses import dataclass
from datetime import UTC, datetime
from pathlib import Path

from heft.daemon.config import StationConfig, parse_config
from heft.daemon.physics.swingweight import points_from_moment_g_in
from heft.drivers.recording import RecordingHeader, RecordingWriter
from heft.drivers.sim.definitions import BeamDef, builtin_definition
from heft.drivers.sim.devices import SimDevice, make_device
from heft.drivers.sim.physics import BenchTimeline, Club, Placement, make_geometry

# Three irons of a Larkspur set (invented). D2 is M14 = 6151.8 g*in (domain.md table): the
# 7-iron reads about D2.2 and the 8-iron D2.0 (in a D2 +/- 0.5 spec), the 6-iron about D3.7 (out).
LARKSPUR_CLUBS: tuple[Club, ...] = (
    Club(415.0, 28.85, "LCW-7i-0001"),
    Club(421.5, 28.60, "LCW-8i-0001"),
    Club(409.0, 29.25, "LCW-6i-0001"),
)


def expected_points(club: Club) -> float:
    """Lorythmic points from the club's moment: (M14 - A0) / 1.75 oz*in (domain.md)."""
    return points_from_moment_g_in(club.moment14_g_in)


def beam_definition() -> BeamDef:
    d = builtin_definition("beam")
    assert isinstance(d, BeamDef)
    return d


def station_toml(
    *,
    port: str,
    db: Path,
    mqtt_port: int | None = None,
    mqtt_root: str = "heft",
    station: str = "bench-1",
    extra: str = "",
    capture: str = 'preset_name = "hx711_80hz"\ncapacity_g = 5000',
    calibrated: bool = True,
) -> str:
    """A two-support station on the simulated beam.

    ``calibrated``: the cells' numbers from the beam's definition (source = "config"); else
    the database's calibration records (source = "database").
    """
    d = beam_definition()
    ch0, ch1 = d.channels[0], d.channels[1]
    if calibrated:
        channels = f"""\
[channels."beam/0"]
source = "config"
zero_counts = {ch0.offset_counts}
counts_per_g = {ch0.counts_per_g}

[channels."beam/1"]
source = "config"
zero_counts = {ch1.offset_counts}
counts_per_g = {ch1.counts_per_g}
"""
    else:
        channels = '[channels."beam/0"]\nsource = "database"\n\n[channels."beam/1"]\n'
        channels += 'source = "database"\n'
    mqtt = (
        f'[mqtt]\nenabled = true\nhost = "127.0.0.1"\nport = {mqtt_port}\n'
        f'topic_root = "{mqtt_root}"\nkeepalive_s = 5\n'
        if mqtt_port is not None
        else "[mqtt]\nenabled = false\n"
    )
    return f"""\
station = "{station}"
job = "larkspur-irons"

[storage]
path = "{db}"

[[devices]]
name = "beam"
driver = "beam"
port = "{port}"
baudrate = 115200

[geometry]
type = "two_support"
channel_a = "beam/0"
position_a_in = "4in"
channel_b = "beam/1"
position_b_in = "36in"

{channels}
[capture]
{capture}

[specs.irons-d2]
swingweight = "D2"
tolerance_points = 0.5

[jobs.larkspur-irons]
spec = "irons-d2"
description = "Larkspur Clubworks irons, D2"
{extra}
{mqtt}"""


def station_config(**kwargs: object) -> StationConfig:
    return parse_config(tomllib.loads(station_toml(**kwargs)))  # type: ignore[arg-type]


def placements(
    clubs: Sequence[Club], *, start_s: float = 1.0, on_s: float = 3.0, gap_s: float = 1.5
) -> list[Placement]:
    out = []
    t = start_s
    for club in clubs:
        out.append(Placement(club, t, t + on_s))
        t += on_s + gap_s
    return out


def beam_device(plan: Sequence[Placement], seed: int = 7) -> SimDevice:
    timeline = BenchTimeline(make_geometry("two_support"), list(plan))
    return make_device(beam_definition(), timeline, seed=seed)


@dataclass(frozen=True)
class Chunk:
    t: float
    data: bytes


def beam_bytes(plan: Sequence[Placement], until_s: float, seed: int = 7) -> Iterator[Chunk]:
    """The bytes the simulated beam sends, in pure code, one chunk per frame."""
    dev = beam_device(plan, seed)
    dev.boot(0.0)
    t = 0.0
    while t < until_s:
        t = min(until_s, t + 0.05)
        for ft, data in dev.advance(t):
            yield Chunk(ft, data)


def write_beam_recording(path: Path, plan: Sequence[Placement], until_s: float) -> None:
    header = RecordingHeader(
        device="beam",
        driver="beam",
        created_utc=datetime(2026, 5, 4, 8, 30, tzinfo=UTC),
        description="Larkspur Clubworks bench-1, simulated",
    )
    with RecordingWriter(path, header) as writer:
        for c in beam_bytes(plan, until_s):
            writer.write_rx(c.t, c.data)
