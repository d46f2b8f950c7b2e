"""What a fault drill reports (the service drills and the fuzz drill alike)."""

from __future__ import annotations

import statistics
from collections.abc import Sequence
from dataclasses import dataclass, field


@dataclass
class DrillResult:
    name: str
    repetitions: int = 0
    measurements: int = 0
    redeliveries: int = 0
    lost: int = 0
    undetected_duplicates: int = 0
    integrity_failures: int = 0
    detect_s: list[float] = field(default_factory=list)
    recover_s: list[float] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)

    @property
    def ok(self) -> bool:
        return self.lost == 0 and self.undetected_duplicates == 0 and self.integrity_failures == 0


def span_text(values: Sequence[float]) -> str:
    if not values:
        return "-"
    return f"{statistics.median(values):.2f} / {max(values):.2f}"
