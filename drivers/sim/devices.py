"""Simulated devices: one per protocol, built from a definition by ``make_device``.

One job per module: ``clockwork`` (what every device shares: the sample grid, delayed frames,
the silent fault; how a caller drives one), ``scales`` (gram scales, protocols a-c),
``beam_device`` (the heft beam, e) and ``scanner_device`` (f). Their names are importable from
here as well.
"""

from __future__ import annotations

from collections.abc import Sequence

from heft.drivers.sim.beam_device import BeamDevice
from heft.drivers.sim.clockwork import Frame, SimDevice
from heft.drivers.sim.definitions import (
    AnyDefinition,
    BeamDef,
    PollBalanceDef,
    RegexLineDef,
    StreamBalanceDef,
)
from heft.drivers.sim.physics import BenchTimeline
from heft.drivers.sim.scales import (
    OVERLOAD_STEPS,
    ZERO_RANGE_FRACTION,
    PollBalance,
    RegexLineScale,
    ScaleDef,
    ScaleDevice,
    ScaleState,
    StreamBalance,
    nice_step,
)
from heft.drivers.sim.scanner_device import ScannerDevice

__all__ = [
    "OVERLOAD_STEPS",
    "ZERO_RANGE_FRACTION",
    "BeamDevice",
    "Frame",
    "PollBalance",
    "RegexLineScale",
    "ScaleDef",
    "ScaleDevice",
    "ScaleState",
    "ScannerDevice",
    "SimDevice",
    "StreamBalance",
    "make_device",
    "nice_step",
]


def make_device(
    definition: AnyDefinition,
    timeline: BenchTimeline,
    *,
    seed: int = 0,
    scans: Sequence[tuple[float, str]] | None = None,
) -> SimDevice:
    """The simulated device for a definition, reading forces from ``timeline``."""
    if isinstance(definition, PollBalanceDef):
        return PollBalance(definition, timeline, seed=seed)
    if isinstance(definition, StreamBalanceDef):
        return StreamBalance(definition, timeline, seed=seed)
    if isinstance(definition, RegexLineDef):
        return RegexLineScale(definition, timeline, seed=seed)
    if isinstance(definition, BeamDef):
        return BeamDevice(definition, timeline, seed=seed)
    return ScannerDevice(definition, timeline, seed=seed, scans=scans)
