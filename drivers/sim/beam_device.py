"""A simulated heft beam (the README's beam protocol, docs/protocols.md e): load-cell ADC counts.

HELLO after a boot banner, samples with sequence number and device time, and the host commands
``!ID``, ``!RATE`` and ``!REBOOT``.
"""

from __future__ import annotations

import math

from heft.drivers.sim import encoders
from heft.drivers.sim.clockwork import SimDevice
from heft.drivers.sim.definitions import BeamDef
from heft.drivers.sim.physics import BenchTimeline, SensorNoise


class BeamDevice(SimDevice):
    """Section e: load cells on an ADC; HELLO, samples with seq and device time, commands."""

    definition: BeamDef

    def __init__(self, definition: BeamDef, timeline: BenchTimeline, *, seed: int) -> None:
        super().__init__(definition, seed=seed)
        for ch in definition.channels:
            if ch.bench_channel not in timeline.channels:
                raise ValueError(
                    f"device {definition.name}: bench_channel {ch.bench_channel} not in the "
                    f"bench's channels {timeline.channels}"
                )
        self.timeline = timeline
        self.seq = 0
        self._boot_s = 0.0
        self._noise = [
            SensorNoise(
                f"{seed}:{definition.name}:{ch.bench_channel}",
                definition.noise_g,
                definition.drift_g_per_s,
            )
            for ch in definition.channels
        ]
        self.adc_min, self.adc_max = encoders.adc_limits(definition.adc_bits)

    def hello(self) -> bytes:
        d = self.definition
        return encoders.beam_hello(
            firmware=d.firmware,
            channels=len(d.channels),
            rate_hz=round(self.rate_hz),
            bits=d.adc_bits,
            serial=d.serial_number,
        )

    def boot(self, t_s: float) -> None:
        """Power-up: silence for ``boot_time_s``, the banner, HELLO, then samples."""
        self._queue.clear()
        self._sampling = False
        self._boot_s = t_s
        self.seq = 0
        ready = t_s + self.definition.boot_time_s
        for i, text in enumerate(self.definition.boot_banner):
            self._later(ready + 0.002 * i, text.encode("ascii", errors="replace") + b"\r\n")
        self._later(ready + 0.002 * len(self.definition.boot_banner), self.hello())
        self._start_sampling(ready + 0.002 * len(self.definition.boot_banner) + self.period_s)

    def device_time_ms(self, t_s: float) -> int:
        d = self.definition
        elapsed_ms = (t_s - self._boot_s) * 1000.0 * (1.0 + d.clock_ppm * 1e-6)
        return (d.clock_start_ms + math.floor(elapsed_ms)) % 2**32

    def counts(self, t_s: float) -> list[int]:
        forces = self.timeline.forces_at(t_s)
        out: list[int] = []
        for ch, noise in zip(self.definition.channels, self._noise, strict=True):
            sensed_g = forces[ch.bench_channel] + noise.sample_g(t_s)
            c = round(ch.offset_counts + ch.counts_per_g * sensed_g)
            out.append(min(self.adc_max, max(self.adc_min, c)))  # the ADC saturates
        return out

    def _sample(self, t_s: float) -> list[bytes]:
        frame = encoders.beam_sample(self.seq, self.device_time_ms(t_s), self.counts(t_s))
        self.seq = (self.seq + 1) % 65536
        return [frame]

    def _command(self, text: str, t_s: float) -> list[bytes]:
        parts = text.split()
        if not parts:
            return []
        cmd = parts[0].upper()
        if cmd == "!ID" and len(parts) == 1:
            return [encoders.beam_ok("ID"), self.hello()]
        if cmd == "!RATE":
            allowed = self.definition.allowed_rates_hz
            if len(parts) != 2 or not parts[1].isdigit() or int(parts[1]) not in allowed:
                rates = " or ".join(str(r) for r in allowed)
                return [encoders.beam_err(f"RATE expects {rates}")]
            self.rate_hz = float(int(parts[1]))
            self._start_sampling(t_s + self.period_s)
            return [encoders.beam_ok(f"RATE {int(parts[1])}"), self.hello()]
        if cmd == "!REBOOT" and len(parts) == 1:
            self.boot(t_s)
            return [encoders.beam_ok("REBOOT")]
        return [encoders.beam_err(f"unknown command {text[:32]}")]
