"""The plant schema on a real PostgreSQL: migrations, month partitions, indexes, gap detection."""

from __future__ import annotations

import threading
from datetime import UTC, datetime
from typing import Any

import psycopg
import pytest

from heft.daemon.plant import migrations
from heft.daemon.plant.db import PlantStoreError, connect
from heft.daemon.plant.migrations import SchemaError, check, current_version, migrate
from heft.daemon.plant.writer import write_measurement
from tests.sample_records import make_measurement

Conn = psycopg.Connection[Any]


def _store(plant_conn: Conn, seq: int, **kw: Any) -> None:
    write_measurement(plant_conn, make_measurement(seq, **kw).model_dump_json())


def test_migrate_applies_once_and_is_idempotent(pg_dsn: str) -> None:
    with connect(pg_dsn) as c:
        assert current_version(c) == 0
        with pytest.raises(SchemaError, match="schema version 0, this heft needs 1"):
            check(c)
        assert migrate(c) == [1]
        assert migrate(c) == []
        check(c)
        rows = c.execute("SELECT version, name FROM schema_version").fetchall()
    assert rows == [(1, "initial")]
    assert migrations.latest_version() == 1


def test_two_collectors_migrating_at_once_apply_each_version_once(pg_dsn: str) -> None:
    results: list[list[int]] = []
    errors: list[BaseException] = []

    def run() -> None:
        try:
            with connect(pg_dsn) as c:
                results.append(migrate(c))
        except BaseException as err:  # reported below, not lost in the thread
            errors.append(err)

    threads = [threading.Thread(target=run) for _ in range(3)]
    for t in threads:
        t.start()
    for t in threads:
        t.join(timeout=60)
    assert not errors
    assert sorted(results) == [[], [], [1]]


def test_a_database_newer_than_the_code_is_refused(
    plant_conn: Conn,
) -> None:
    plant_conn.execute(
        "INSERT INTO schema_version (version, name, sha256) VALUES (2, 'future', 'x')"
    )
    with pytest.raises(SchemaError, match=r"schema version 2 .*newer than this heft"):
        migrate(plant_conn)
    with pytest.raises(SchemaError, match="newer than this heft"):
        check(plant_conn)


def test_an_edited_migration_is_refused(plant_conn: Conn) -> None:
    plant_conn.execute("UPDATE schema_version SET sha256 = 'edited' WHERE version = 1")
    with pytest.raises(SchemaError, match="0001_initial differs"):
        migrate(plant_conn)


def test_migrate_refuses_a_connection_inside_a_transaction(pg_dsn: str) -> None:
    with psycopg.connect(pg_dsn) as c:  # not autocommit: the SELECT opens a transaction
        c.execute("SELECT 1")
        with pytest.raises(PlantStoreError, match="open transaction"):
            migrate(c)


def _partitions(plant_conn: Conn) -> list[str]:
    rows = plant_conn.execute(
        "SELECT c.relname FROM pg_inherits i JOIN pg_class c ON c.oid = i.inhrelid "
        "WHERE i.inhparent = 'measurements'::regclass ORDER BY 1"
    ).fetchall()
    return [str(r[0]) for r in rows]


def test_month_partitions_are_made_ahead_and_on_demand(
    plant_conn: Conn,
) -> None:
    now = datetime.now(UTC)
    months = [now.year * 12 + now.month - 1 + ahead for ahead in range(4)]
    expected = [f"measurements_{m // 12:04d}_{m % 12 + 1:02d}" for m in months]
    assert set(expected) <= set(_partitions(plant_conn))
    # A measurement from a month long past gets its own partition, bounded by UTC month edges.
    _store(plant_conn, 1, time_utc=datetime(2024, 2, 29, 23, 59, 59, tzinfo=UTC))
    _store(plant_conn, 2, time_utc=datetime(2024, 3, 1, 0, 0, 0, tzinfo=UTC))
    rows = plant_conn.execute(
        "SELECT seq, tableoid::regclass::text FROM measurements ORDER BY seq"
    ).fetchall()
    assert rows == [(1, "measurements_2024_02"), (2, "measurements_2024_03")]
    # plant_maintain is safe to run again: it only creates what is missing.
    before = _partitions(plant_conn)
    plant_conn.execute("SELECT plant_maintain(3)")
    assert _partitions(plant_conn) == before


def test_gaps_are_the_missing_runs_of_seq(plant_conn: Conn) -> None:
    for seq in (3, 4, 5, 8, 9, 12):
        _store(plant_conn, seq)
    _store(plant_conn, 1, station="bench-2")
    _store(plant_conn, 2, station="bench-2")
    gaps = plant_conn.execute("SELECT * FROM measurement_gaps('bench-1')").fetchall()
    assert gaps == [(1, 2), (6, 7), (10, 11)]
    assert plant_conn.execute("SELECT * FROM measurement_gaps('bench-2')").fetchall() == []
    assert plant_conn.execute("SELECT * FROM measurement_gaps('no-such-bench')").fetchall() == []


@pytest.mark.parametrize(
    ("where", "index"),
    [
        ("job = 'LC-2417'", "measurements_job"),
        ("payload ->> 'order_ref' = 'PO-88' AND payload ? 'order_ref'", "measurements_order_ref"),
        (
            "station = 'bench-1' AND time_utc >= '2026-11-30' AND time_utc < '2026-12-01'",
            "measurements_station_time",
        ),
        ("club_id = 'LCW-00001'", "measurements_club_id"),
        ("calibration_ids @> ARRAY['cal-beam-0-1']", "measurements_calibration_ids"),
    ],
)
def test_the_usual_questions_can_use_an_index(plant_conn: Conn, where: str, index: str) -> None:
    """Each question's index is usable (sequential scans off: the test table is tiny)."""
    _store(plant_conn, 1)
    with plant_conn.transaction():
        plant_conn.execute("SET LOCAL enable_seqscan = off")
        plan = "\n".join(
            str(r[0])
            for r in plant_conn.execute(f"EXPLAIN SELECT * FROM measurements WHERE {where}")
        )
    # The plan must scan a partition's copy of that very index (attached to the parent index).
    children = plant_conn.execute(
        "SELECT c.relname FROM pg_inherits i JOIN pg_class c ON c.oid = i.inhrelid "
        "WHERE i.inhparent = %s::regclass",
        (index,),
    ).fetchall()
    assert children
    scanned = [name for (name,) in children if f" {name} " in plan or plan.endswith(f" {name}")]
    assert scanned, plan
