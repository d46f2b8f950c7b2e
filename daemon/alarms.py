"""Alarm state: raise, clear, acknowledge, with a bounded history (pure; clock passed in).

An alarm is identified by its key ``'<kind>:<source>'``. Raising an active alarm again with the
same message changes nothing (no event storm while a device stays offline); a new message (a
second club out of spec) is a new event and needs a new acknowledgement.

The parts that find conditions (the pipeline, the calibration part) do not hold alarm state:
they hand out :class:`AlarmCondition` values, and the service applies them to its one
:class:`AlarmManager` (:meth:`AlarmManager.apply`), publishing and logging each change.
"""

from __future__ import annotations

from collections import deque
from collections.abc import Callable
from dataclasses import dataclass
from datetime import datetime

from heft.daemon.events import Alarm, AlarmKind


@dataclass(frozen=True, slots=True)
class AlarmCondition:
    """A condition found by a part: raise ``kind`` on ``source`` (``active``) or clear it.

    ``message`` is the alarm's wording when raised and the history's note when cleared.
    """

    kind: AlarmKind
    source: str
    active: bool
    message: str


class UnknownAlarmError(KeyError):
    """``acknowledge`` of a key that is not an active alarm."""


class AlarmManager:
    """The station's alarms."""

    def __init__(
        self,
        station: str,
        clock_utc: Callable[[], datetime],
        on_change: Callable[[Alarm], None] | None = None,
        history_size: int = 500,
    ) -> None:
        self.station = station
        self._clock = clock_utc
        self._on_change = on_change
        self._active: dict[str, Alarm] = {}
        self.history: deque[Alarm] = deque(maxlen=history_size)

    def _emit(self, alarm: Alarm) -> Alarm:
        self.history.append(alarm)
        if self._on_change is not None:
            self._on_change(alarm)
        return alarm

    def raise_alarm(self, kind: AlarmKind, source: str, message: str) -> Alarm | None:
        """Raise (or re-word) an alarm; returns the changed alarm, None when nothing changed."""
        key = f"{kind.value}:{source}"
        current = self._active.get(key)
        if current is not None and current.message == message:
            return None
        alarm = Alarm(
            station=self.station, kind=kind, source=source, active=True, message=message,
            time_utc=self._clock(),
        )
        self._active[key] = alarm
        return self._emit(alarm)

    def clear(self, kind: AlarmKind, source: str, message: str = "cleared") -> Alarm | None:
        """Clear an active alarm; None when it was not active."""
        key = f"{kind.value}:{source}"
        if self._active.pop(key, None) is None:
            return None
        return self._emit(
            Alarm(
                station=self.station, kind=kind, source=source, active=False, message=message,
                time_utc=self._clock(),
            )
        )

    def set(self, kind: AlarmKind, source: str, active: bool, message: str) -> Alarm | None:
        """Raise when ``active`` else clear: for conditions re-evaluated on every sample."""
        if active:
            return self.raise_alarm(kind, source, message)
        return self.clear(kind, source)

    def apply(self, condition: AlarmCondition) -> Alarm | None:
        """Raise (or re-word) or clear as ``condition`` says; the change, None when none."""
        if condition.active:
            return self.raise_alarm(condition.kind, condition.source, condition.message)
        return self.clear(condition.kind, condition.source, condition.message)

    def acknowledge(self, key: str) -> Alarm:
        """Mark an active alarm seen; it stays active until its cause clears."""
        current = self._active.get(key)
        if current is None:
            raise UnknownAlarmError(key)
        if current.acknowledged:
            return current
        acked = current.model_copy(update={"acknowledged": True, "time_utc": self._clock()})
        self._active[key] = acked
        return self._emit(acked)

    def is_active(self, kind: AlarmKind, source: str) -> bool:
        return f"{kind.value}:{source}" in self._active

    def active(self) -> list[Alarm]:
        """Active alarms, oldest first."""
        return sorted(self._active.values(), key=lambda a: a.time_utc)

    def active_keys(self) -> list[str]:
        return sorted(self._active)
