"""Replay recordings through the bench pipeline in virtual time (no ports, no broker, no clock).

Each recording (``drivers.recording`` format, one device per file) is matched to a device of the
station config: by the header's device name, else by its driver when only one device uses it.
Chunks of all recordings are merged on one timeline (each file's ``created_utc`` plus its ``t``),
fed to the configured drivers, and the pipeline runs exactly as it does live. Measurement ids are
uuid5 of the recordings' names and the sequence number, and the wall clock is the recording's,
so the same input always gives the same output.
"""

from __future__ import annotations

import heapq
from collections.abc import Iterator, Sequence
from dataclasses import dataclass
from datetime import datetime, timedelta
from pathlib import Path

from heft.daemon.config import StationConfig
from heft.daemon.events import MeasurementCaptured
from heft.daemon.measurement import Measurement
from heft.daemon.pipeline import BenchPipeline, PipelineOutput
from heft.daemon.records import CalibrationRecord
from heft.drivers.base import Driver
from heft.drivers.recording import Recording, read_recording
from heft.drivers.registry import create_driver

# After the last chunk, advance virtual time this far so pending timeouts fire.
TAIL_S = 10.0


class ReplayError(ValueError):
    """A recording that does not fit the station config; the message names file and device."""


@dataclass(frozen=True, slots=True)
class _Source:
    path: Path
    recording: Recording
    device: str
    offset_s: float


def match_device(config: StationConfig, recording: Recording, path: Path) -> str:
    """The config device a recording belongs to."""
    header = recording.header
    names = {d.name for d in config.devices}
    if header.device in names:
        device = config.device(header.device)
        if device.driver != header.driver:
            raise ReplayError(
                f"{path}: recorded with driver {header.driver!r}, but device {device.name!r} "
                f"uses {device.driver!r} in the config"
            )
        return header.device
    same_driver = [d.name for d in config.devices if d.driver == header.driver]
    if len(same_driver) == 1:
        return same_driver[0]
    raise ReplayError(
        f"{path}: recorded device {header.device!r} (driver {header.driver}) matches no single "
        f"device of the config; devices: "
        + ", ".join(f"{d.name} ({d.driver})" for d in config.devices)
    )


def _sources(config: StationConfig, paths: Sequence[Path]) -> list[_Source]:
    loaded = [(p, read_recording(p)) for p in paths]
    if not loaded:
        raise ReplayError("no recordings given")
    start = min(r.header.created_utc for _, r in loaded)
    sources = [
        _Source(p, r, match_device(config, r, p), (r.header.created_utc - start).total_seconds())
        for p, r in loaded
    ]
    seen: dict[str, Path] = {}
    for s in sources:
        if s.device in seen:
            raise ReplayError(f"{s.path} and {seen[s.device]} are both recordings of {s.device!r}")
        seen[s.device] = s.path
    return sources


def _merged(sources: list[_Source]) -> Iterator[tuple[float, int, bytes]]:
    """(t, source index, bytes) of every received chunk, in time order (stable per file)."""
    streams = [_stream(i, s) for i, s in enumerate(sources)]
    return heapq.merge(*streams, key=lambda item: (item[0], item[1]))


def _stream(index: int, source: _Source) -> Iterator[tuple[float, int, bytes]]:
    name = source.recording.header.device
    for c in source.recording.rx:
        if c.device == name:
            yield source.offset_s + c.t, index, c.data


def replay(
    config: StationConfig,
    paths: Sequence[Path],
    *,
    calibrations: dict[str, CalibrationRecord] | None = None,
) -> Iterator[Measurement]:
    """Yield each measurement the pipeline captures from the recordings, in order."""
    sources = _sources(config, paths)
    start_utc = min(s.recording.header.created_utc for s in sources)
    now_s = 0.0

    def clock_utc() -> datetime:
        return start_utc + timedelta(seconds=now_s)

    drivers: list[Driver] = []
    for s in sources:
        device = config.device(s.device)
        drivers.append(create_driver(device.driver, device.name, device.options))
    pipeline = BenchPipeline(
        config,
        clock_utc,
        calibrations=calibrations,
        replay_source="|".join(p.name for p in paths),
    )

    def measurements(events: list[PipelineOutput]) -> Iterator[Measurement]:
        for ev in events:
            if isinstance(ev, MeasurementCaptured):
                yield ev.measurement

    for t, index, data in _merged(sources):
        now_s = t
        yield from measurements(pipeline.tick(t))
        for output in drivers[index].feed(data, t):
            yield from measurements(pipeline.feed(output))
    end = now_s + TAIL_S
    while now_s < end:
        now_s = min(end, now_s + 0.5)
        yield from measurements(pipeline.tick(now_s))
