"""An invented demo scenario, and recordings made by running simulated devices in virtual time.

Larkspur Clubworks (an invented maker) builds a set of irons, 4-iron to PW, on station
``bench-1``: two load cells under supports 4 in and 36 in from the butt stop, read by a heft
beam at 80 samples/s, and a barcode scanner that tags each club just before it is laid down.
Two clubs are out of spec on purpose (the 8-iron heavy, the PW light) and one placement is
bumped. All numbers are invented for the demo.

``run_virtual`` runs any devices on a virtual clock (no pty, no sleeping), and
``generate_recording`` turns the scenario into recordings in the ``drivers.recording`` format
plus the ground truth, identically for the same seed.
"""

from __future__ import annotations

import io
import random
from collections.abc import Sequence
from dataclasses import dataclass, field
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

from heft.drivers.recording import Chunk, RecordingHeader, RecordingWriter
from heft.drivers.sim.definitions import BeamDef, ScannerDef, builtin_of
from heft.drivers.sim.devices import BeamDevice, ScannerDevice, SimDevice
from heft.drivers.sim.physics import (
    BenchTimeline,
    Club,
    Dynamics,
    Placement,
    PlacementTruth,
    TwoSupports,
)

MAKER = "Larkspur Clubworks"

# (label, club id, total weight g, balance point in); invented. Swing weights by the Lorythmic
# formula in domain.md: about D1.6 ... D2.4, except the 8-iron (about D5.3) and PW (about C8.6).
LARKSPUR_IRONS: tuple[tuple[str, str, float, float], ...] = (
    ("4-iron", "LCW-2611-4I", 386.4, 29.87),
    ("5-iron", "LCW-2611-5I", 392.8, 29.69),
    ("6-iron", "LCW-2611-6I", 399.1, 29.40),
    ("7-iron", "LCW-2611-7I", 405.6, 29.22),
    ("8-iron", "LCW-2611-8I", 412.2, 29.32),
    ("9-iron", "LCW-2611-9I", 419.5, 28.66),
    ("PW", "LCW-2611-PW", 427.9, 27.98),
)


@dataclass(frozen=True)
class Scenario:
    """A bench session: clubs laid down one after another on a two-support beam."""

    station: str
    job: str
    clubs: tuple[tuple[str, Club], ...]  # (label, club)
    geometry: TwoSupports
    beam: BeamDef
    scanner: ScannerDef
    dynamics: Dynamics = field(default_factory=Dynamics)
    first_on_s: float = 2.0
    hold_s: tuple[float, float] = (2.5, 3.5)  # each club stays this long (seeded draw)
    gap_s: tuple[float, float] = (1.5, 2.5)  # bench empty between clubs (seeded draw)
    bumped: tuple[str, ...] = ()  # club ids that get one bump while held
    bump_g: float = 25.0
    target_points: float = 32.0  # D2
    tolerance_points: float = 1.5
    truth_tolerance_g: float = 0.05
    created_utc: datetime = datetime(2026, 5, 4, 8, 0, tzinfo=UTC)

    @property
    def duration_s(self) -> float:
        """Upper bound of the session: every club held and lifted at the longest draws."""
        per_club = self.hold_s[1] + self.gap_s[1]
        return self.first_on_s + len(self.clubs) * per_club + 1.0


def larkspur_irons() -> Scenario:
    """The demo: Larkspur Clubworks' 4-iron to PW on bench-1 (spec D2 +/- 1.5 points)."""
    return Scenario(
        station="bench-1",
        job="LCW-2611 irons 4-PW",
        clubs=tuple((label, Club(w, bp, cid)) for label, cid, w, bp in LARKSPUR_IRONS),
        geometry=TwoSupports(support_a_in=4.0, support_b_in=36.0),
        beam=builtin_of("beam", BeamDef).model_copy(update={"rate_hz": 80}),
        scanner=builtin_of("scanner", ScannerDef),
        bumped=("LCW-2611-6I",),
    )


def scenario_timeline(scenario: Scenario, seed: int) -> BenchTimeline:
    """The placements of the scenario, with hold times, gaps and bump times drawn from ``seed``."""
    rng = random.Random(f"scenario:{seed}")
    placements: list[Placement] = []
    t = scenario.first_on_s
    for _, club in scenario.clubs:
        hold = rng.uniform(*scenario.hold_s)
        bumps: tuple[tuple[float, float], ...] = ()
        if club.club_id in scenario.bumped:
            bumps = ((t + rng.uniform(0.4, 0.7) * hold, scenario.bump_g),)
        placements.append(Placement(club, t, t + hold, bumps))
        t += hold + rng.uniform(*scenario.gap_s)
    return BenchTimeline(scenario.geometry, placements, scenario.dynamics)


def run_virtual(
    devices: Sequence[SimDevice], until_s: float, *, boot_s: float = 0.0
) -> list[tuple[float, str, bytes]]:
    """Boot every device at ``boot_s`` and collect what each sends up to ``until_s``.

    Returns ``(t_s, device name, bytes)`` sorted by time (ties keep device order).
    """
    out: list[tuple[float, str, bytes]] = []
    for device in devices:
        device.boot(boot_s)
        out.extend((t, device.name, data) for t, data in device.advance(until_s))
    out.sort(key=lambda item: item[0])
    return out


def recording_lines(
    device: SimDevice,
    frames: Sequence[tuple[float, str, bytes]],
    *,
    options: dict[str, Any] | None = None,
    created_utc: datetime,
    description: str = "",
) -> list[str]:
    """A complete recording (header first) of ``device``'s frames, one chunk per frame."""
    header = RecordingHeader(
        device=device.name,
        driver=device.definition.protocol,
        options=options or {},
        created_utc=created_utc,
        description=description,
    )
    buffer = io.StringIO()
    with RecordingWriter(buffer, header) as writer:
        for t, name, data in frames:
            if name == device.name:
                writer.write(Chunk(t, name, data))
    return buffer.getvalue().splitlines()


def record_devices(
    devices: Sequence[SimDevice],
    until_s: float,
    *,
    created_utc: datetime,
    description: str = "",
    options: dict[str, dict[str, Any]] | None = None,
) -> dict[str, list[str]]:
    """Run ``devices`` in virtual time (``run_virtual``) and return one recording per device.

    ``options`` maps a device name to the driver options written in its header.
    """
    frames = run_virtual(devices, until_s)
    return {
        dev.name: recording_lines(
            dev,
            frames,
            options=(options or {}).get(dev.name),
            created_utc=created_utc,
            description=description,
        )
        for dev in devices
    }


def generate_recording(
    scenario: Scenario, seed: int
) -> tuple[dict[str, list[str]], list[PlacementTruth]]:
    """Run the scenario's beam and scanner in virtual time.

    Returns one recording per device (``{device name: JSONL lines, header first}``; write each
    to its own file, joined with newlines) and the ground truth per placement. The same
    scenario and seed give the same bytes.
    """
    timeline = scenario_timeline(scenario, seed)
    beam = BeamDevice(scenario.beam, timeline, seed=seed)
    scanner = ScannerDevice(scenario.scanner, timeline, seed=seed)
    end_s = timeline.placements[-1].t_off_s + 1.5 if timeline.placements else 1.0
    note = f"{MAKER}, {scenario.station}, job {scenario.job!r}; simulated, seed {seed}"
    recordings = record_devices(
        [beam, scanner], end_s, created_utc=scenario.created_utc, description=note
    )
    return recordings, timeline.truth(scenario.truth_tolerance_g)


def write_recordings(scenario: Scenario, seed: int, folder: str | Path) -> dict[str, Path]:
    """``generate_recording`` written to ``folder/<device>.jsonl``; returns the paths."""
    recordings, _ = generate_recording(scenario, seed)
    out: dict[str, Path] = {}
    for name, lines in recordings.items():
        path = Path(folder) / f"{name}.jsonl"
        path.write_text("\n".join(lines) + "\n", encoding="utf-8")
        out[name] = path
    return out
