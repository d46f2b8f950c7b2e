"""Store on real SQLite files: durability settings, append-only log, outbox, filters, errors."""

from __future__ import annotations

import sqlite3
from collections.abc import Iterator
from datetime import timedelta
from pathlib import Path

import pytest

from heft.daemon import storage
from heft.daemon.events import AlarmKind
from heft.daemon.measurement import Verdict
from heft.daemon.storage import SCHEMA_VERSION, StorageError, Store
from tests.sample_records import T0, make_alarm, make_calibration, make_measurement


@pytest.fixture
def store(tmp_path: Path) -> Iterator[Store]:
    s = Store(tmp_path / "heft.db")
    yield s
    s.close()


def test_wal_and_synchronous_full(store: Store, tmp_path: Path) -> None:
    assert store.pragma("journal_mode") == "wal"
    assert store.pragma("synchronous") == 2  # 2 = FULL (sqlite.org/pragma.html#pragma_synchronous)
    # WAL is a property of the file: a second, independent connection sees it too.
    other = sqlite3.connect(tmp_path / "heft.db")
    try:
        assert other.execute("PRAGMA journal_mode").fetchone()[0] == "wal"
    finally:
        other.close()


def test_schema_version_applied_once_and_newer_file_refused(tmp_path: Path) -> None:
    path = tmp_path / "v.db"
    Store(path).close()
    with Store(path) as again:  # reopening must not re-run migrations (would fail: tables exist)
        assert again.pragma("user_version") == SCHEMA_VERSION
    raw = sqlite3.connect(path)
    raw.execute(f"PRAGMA user_version={SCHEMA_VERSION + 1}")
    raw.close()
    with pytest.raises(StorageError, match=r"schema version \d+ is newer"):
        Store(path)


def test_measurement_round_trip_outbox_and_seq(store: Store) -> None:
    assert store.next_seq("bench-1") == 1
    m1, m2 = make_measurement(1), make_measurement(2, verdict=Verdict.FAIL)
    store.add_measurement(m1)
    store.add_measurement(m2)
    assert list(store.measurements()) == [m1, m2]
    assert store.next_seq("bench-1") == 3
    assert store.next_seq("qc-1") == 1
    pending = store.outbox_pending()
    assert [m for _, m in pending] == [m1, m2]
    store.mark_sent(pending[0][0])
    assert [m for _, m in store.outbox_pending()] == [m2]
    assert store.outbox_count() == 1
    assert store.measurement(str(m2.id)) == m2
    assert store.recent_measurements(1) == [m2]


def test_append_only_triggers_refuse_update_and_delete(store: Store, tmp_path: Path) -> None:
    store.add_measurement(make_measurement(1))
    store.add_calibration(make_calibration("beam/0", "zero", T0))
    raw = sqlite3.connect(tmp_path / "heft.db")
    try:
        for sql in (
            "UPDATE measurements SET verdict = 'pass'",
            "DELETE FROM measurements",
            "UPDATE calibrations SET kind = 'span'",
            "DELETE FROM calibrations",
        ):
            with pytest.raises(sqlite3.IntegrityError, match="append-only"):
                raw.execute(sql)
        assert raw.execute("SELECT COUNT(*) FROM measurements").fetchone()[0] == 1
    finally:
        raw.close()


def test_retry_is_idempotent_and_conflicts_are_refused(store: Store) -> None:
    m = make_measurement(1)
    store.add_measurement(m)
    store.add_measurement(m)  # a retry of the same record: no duplicate, no outbox row
    assert store.outbox_count() == 1
    clash = make_measurement(1)  # new id, same station and seq
    with pytest.raises(StorageError, match="store measurement"):
        store.add_measurement(clash)
    same_id = m.model_copy(update={"total_weight_g": 999.0})
    with pytest.raises(StorageError, match="different content"):
        store.add_measurement(same_id)
    assert list(store.measurements()) == [m]


def test_filters_and_paging(store: Store, monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr(storage, "_PAGE_ROWS", 3)  # force several pages through the iterator
    ms = [
        make_measurement(
            i,
            time_utc=T0 + timedelta(hours=i),
            job="LC-2417" if i % 2 else "LC-2418",
            verdict=Verdict.FAIL if i % 3 == 0 else Verdict.PASS,
            station="qc-1" if i == 9 else "bench-1",
        )
        for i in range(1, 11)
    ]
    for m in ms:
        store.add_measurement(m)
    assert list(store.measurements()) == ms
    got = list(store.measurements(since=T0 + timedelta(hours=3), until=T0 + timedelta(hours=7)))
    assert [m.seq for m in got] == [3, 4, 5, 6]  # since inclusive, until exclusive
    assert [m.seq for m in store.measurements(job="LC-2418")] == [2, 4, 6, 8, 10]
    assert [m.seq for m in store.measurements(verdict="fail")] == [3, 6, 9]
    assert [m.seq for m in store.measurements(verdict=Verdict.FAIL, job="LC-2418")] == [6]
    assert [m.seq for m in store.measurements(station="qc-1")] == [9]
    assert [m.seq for m in store.recent_measurements(4)] == [7, 8, 9, 10]


def test_disk_full_is_a_clear_storage_error_and_nothing_half_stored(store: Store) -> None:
    store.add_measurement(make_measurement(1))
    # Cap the file at its current size: SQLite then fails with SQLITE_FULL exactly as on a full
    # disk (sqlite.org/pragma.html#pragma_max_page_count).
    pages = store.pragma("page_count")
    store._conn.execute(f"PRAGMA max_page_count={pages}")
    big = make_measurement(2).model_copy(update={"calibration_ids": ["x" * 200] * 200})
    with pytest.raises(StorageError, match=r"store measurement .* failed: .*full"):
        store.add_measurement(big)
    assert store.outbox_count() == 1
    assert [m.seq for m in store.measurements()] == [1]
    # The caller kept `big` in memory; once space is back, the same call stores it.
    store._conn.execute("PRAGMA max_page_count=1073741823")
    store.add_measurement(big)
    assert [m.seq for m in store.measurements()] == [1, 2]
    assert store.integrity_check() == "ok"


def test_unopenable_path_names_the_file(tmp_path: Path) -> None:
    missing = tmp_path / "no-such-dir" / "heft.db"
    with pytest.raises(StorageError, match="no-such-dir"):
        Store(missing)


def test_calibrations_latest_per_channel_and_kind(store: Store) -> None:
    z1 = make_calibration("beam/0", "zero", T0)
    s1 = make_calibration("beam/0", "span", T0 + timedelta(minutes=1), counts_per_g=410.0)
    z2 = make_calibration("beam/0", "zero", T0 + timedelta(days=1))
    other = make_calibration("beam/1", "span", T0 + timedelta(days=2))
    for rec in (z1, s1, z2, other):
        store.add_calibration(rec)
    assert store.latest_calibration("beam/0") == z2
    assert store.latest_calibration("beam/0", "span") == s1
    assert store.latest_calibration("beam/2") is None
    assert store.calibrations("beam/0") == [z1, s1, z2]
    assert len(store.calibrations()) == 4


def test_alarm_history_and_active_set(store: Store) -> None:
    store.record_alarm(make_alarm(AlarmKind.DEVICE_OFFLINE, "beam", True, T0))
    store.record_alarm(make_alarm(AlarmKind.OVERLOAD, "beam/0", True, T0 + timedelta(seconds=1)))
    store.record_alarm(
        make_alarm(AlarmKind.DEVICE_OFFLINE, "beam", False, T0 + timedelta(seconds=2))
    )
    history = store.alarm_history(10)
    assert [(a.key, a.active) for a in history] == [
        ("device_offline:beam", False),
        ("overload:beam/0", True),
        ("device_offline:beam", True),
    ]
    assert history[0].time_utc == T0 + timedelta(seconds=2)
    assert [a.key for a in store.active_alarms()] == ["overload:beam/0"]
    assert store.active_alarms(station="qc-1") == []
    assert len(store.alarm_history(1)) == 1


def test_integrity_check_reports_damage(tmp_path: Path) -> None:
    path = tmp_path / "dmg.db"
    with Store(path) as s:
        for i in range(1, 30):
            s.add_measurement(make_measurement(i))
        assert s.integrity_check() == "ok"
        s._conn.execute("PRAGMA wal_checkpoint(TRUNCATE)")
    # Overwrite the middle of the file with garbage: integrity_check must not say 'ok'.
    data = bytearray(path.read_bytes())
    page = 4096
    data[2 * page : 3 * page] = b"\xa5" * page
    path.write_bytes(bytes(data))
    try:
        with Store(path) as s:
            result = s.integrity_check()
        assert result != "ok"
        assert "malformed" in result or "corrupt" in result or "page" in result
    except StorageError as err:  # damage severe enough to fail on open is also a clear error
        assert str(path) in str(err)
