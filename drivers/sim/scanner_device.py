"""A simulated barcode / QR scanner in serial line mode (docs/protocols.md f)."""

from __future__ import annotations

from collections.abc import Sequence

from heft.drivers.sim import encoders
from heft.drivers.sim.clockwork import SimDevice
from heft.drivers.sim.definitions import ScannerDef
from heft.drivers.sim.physics import BenchTimeline


class ScannerDevice(SimDevice):
    """Section f: one line per scan; by default it scans each placed club shortly before."""

    definition: ScannerDef

    def __init__(
        self,
        definition: ScannerDef,
        timeline: BenchTimeline | None = None,
        *,
        seed: int = 0,
        scans: Sequence[tuple[float, str]] | None = None,
    ) -> None:
        super().__init__(definition, seed=seed)
        if scans is None:
            placements = timeline.placements if timeline is not None else ()
            scans = [
                (max(0.0, p.t_on_s - definition.scan_lead_s), p.club.club_id)
                for p in placements
                if p.club.club_id
            ]
        self.scans = sorted(scans)
        self._next_scan = 0

    def boot(self, t_s: float) -> None:
        super().boot(t_s)
        # A scanner plugged in late does not replay scans that happened before it.
        while self._next_scan < len(self.scans) and self.scans[self._next_scan][0] < t_s:
            self._next_scan += 1

    def _sample(self, t_s: float) -> list[bytes]:
        out: list[bytes] = []
        while self._next_scan < len(self.scans) and self.scans[self._next_scan][0] <= t_s:
            club_id = self.scans[self._next_scan][1]
            d = self.definition
            out.append(
                encoders.scan_line(
                    club_id,
                    prefix=d.prefix,
                    suffix=d.suffix,
                    terminator=d.terminator.encode("ascii"),
                )
            )
            self._next_scan += 1
        return out

    def _command(self, text: str, t_s: float) -> list[bytes]:
        return []  # a scanner in line mode does not listen
