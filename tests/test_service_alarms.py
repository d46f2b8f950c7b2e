"""Alarm manager: raise, re-word, clear, acknowledge, history; every change reported once."""

from __future__ import annotations

from datetime import UTC, datetime, timedelta

import pytest

from heft.daemon.alarms import AlarmCondition, AlarmManager, UnknownAlarmError
from heft.daemon.events import Alarm, AlarmKind


def make() -> tuple[AlarmManager, list[Alarm], list[int]]:
    seen: list[Alarm] = []
    tick = [0]

    def clock() -> datetime:
        tick[0] += 1
        return datetime(2026, 5, 4, tzinfo=UTC) + timedelta(seconds=tick[0])

    return AlarmManager("bench-1", clock, seen.append), seen, tick


def test_raise_is_reported_once_and_cleared() -> None:
    mgr, seen, _ = make()
    assert mgr.raise_alarm(AlarmKind.DEVICE_OFFLINE, "beam", "beam offline") is not None
    assert mgr.raise_alarm(AlarmKind.DEVICE_OFFLINE, "beam", "beam offline") is None
    assert mgr.is_active(AlarmKind.DEVICE_OFFLINE, "beam")
    assert mgr.active_keys() == ["device_offline:beam"]
    cleared = mgr.clear(AlarmKind.DEVICE_OFFLINE, "beam", "back")
    assert cleared is not None and not cleared.active
    assert mgr.clear(AlarmKind.DEVICE_OFFLINE, "beam") is None
    assert [a.active for a in seen] == [True, False]
    assert list(mgr.history) == seen


def test_new_message_is_a_new_event_needing_a_new_ack() -> None:
    mgr, seen, _ = make()
    mgr.raise_alarm(AlarmKind.OUT_OF_SPEC, "station", "club 1 heavy")
    acked = mgr.acknowledge("out_of_spec:station")
    assert acked.acknowledged and acked.active
    mgr.raise_alarm(AlarmKind.OUT_OF_SPEC, "station", "club 2 light")
    assert not mgr.active()[0].acknowledged
    assert len(seen) == 3


def test_acknowledge_unknown_key() -> None:
    mgr, _, _ = make()
    with pytest.raises(UnknownAlarmError):
        mgr.acknowledge("overload:beam/0")


def test_set_follows_a_condition() -> None:
    mgr, seen, _ = make()
    for active in (False, True, True, False, False):
        mgr.set(AlarmKind.OVERLOAD, "beam/0", active, "overloaded")
    assert [a.active for a in seen] == [True, False]


def test_a_condition_raises_rewords_or_clears_with_its_message() -> None:
    mgr, seen, _ = make()
    offline = AlarmCondition(AlarmKind.DEVICE_OFFLINE, "beam", True, "beam offline")
    assert mgr.apply(offline) is not None
    assert mgr.apply(offline) is None  # the same condition again changes nothing
    reworded = AlarmCondition(AlarmKind.DEVICE_OFFLINE, "beam", True, "beam gone")
    assert mgr.apply(reworded) is not None
    back = mgr.apply(AlarmCondition(AlarmKind.DEVICE_OFFLINE, "beam", False, "beam is back"))
    assert back is not None and not back.active and back.message == "beam is back"
    assert mgr.apply(AlarmCondition(AlarmKind.DEVICE_OFFLINE, "beam", False, "again")) is None
    assert [(a.active, a.message) for a in seen] == [
        (True, "beam offline"), (True, "beam gone"), (False, "beam is back"),
    ]
