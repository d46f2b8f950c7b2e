"""What the capture engine hands out: state changes, captures, warnings, zero tracking (values).

The engine (heft.daemon.capture) returns a list of these from every call; the pipeline turns
them into events, measurements and alarm conditions.
"""

from __future__ import annotations

from dataclasses import dataclass

from heft.daemon.events import CaptureState


@dataclass(frozen=True, slots=True)
class WindowStats:
    """The stable window of one channel that a capture was taken from (net grams)."""

    mean_g: float
    stdev_g: float
    n: int
    t_start_s: float
    t_end_s: float


@dataclass(frozen=True, slots=True)
class StateChanged:
    state: CaptureState
    t_s: float
    detail: str = ""


@dataclass(frozen=True, slots=True)
class Captured:
    """One capture: the net mean of every channel's stable window."""

    t_s: float
    t_placed_s: float
    windows: dict[str, WindowStats]

    @property
    def total_g(self) -> float:
        return sum(w.mean_g for w in self.windows.values())


@dataclass(frozen=True, slots=True)
class Warning:  # the name in the engine's contract; CaptureWarning is an alias
    """A condition the operator should see; ``active=False`` clears an earlier one."""

    kind: str  # 'will_not_settle' | 'overload' | 'zero_out_of_range' | 'needs_zero'
    t_s: float
    message: str
    channel: str = ""
    active: bool = True


CaptureWarning = Warning


@dataclass(frozen=True, slots=True)
class ZeroTracked:
    """Zero tracking moved a channel's zero offset (subtracted from every reading)."""

    channel: str
    offset_g: float
    t_s: float = 0.0


CaptureOutput = StateChanged | Captured | Warning | ZeroTracked
