"""The plant writer on a real PostgreSQL: idempotent, one transaction a message, clear refusals."""

from __future__ import annotations

import json
import subprocess
import sys
from datetime import datetime, timedelta
from typing import Any

import psycopg
import pytest

from heft.daemon.plant.db import PlantStoreError, connect
from heft.daemon.plant.migrations import migrate
from heft.daemon.plant.writer import (
    Outcome,
    PayloadRefused,
    write_alarm,
    write_calibration,
    write_measurement,
    write_refused,
    write_status,
)
from tests.sample_records import T0, make_calibration, make_measurement

Conn = psycopg.Connection[Any]


def _count(plant_conn: Conn, table: str) -> int:
    row = plant_conn.execute(f"SELECT count(*) FROM {table}").fetchone()  # test tables only
    assert row is not None
    return int(row[0])


def _alarm(**changes: Any) -> dict[str, Any]:
    alarm = {
        "station": "bench-1",
        "key": "device_offline:scale",
        "kind": "device_offline",
        "source": "scale",
        "active": True,
        "acknowledged": False,
        "message": "scale: no data for 2.0 s",
        "time_utc": "2026-11-30T08:15:02.250000Z",
    }
    alarm.update(changes)
    return alarm


def test_a_measurement_is_stored_with_its_numbers_and_the_payload_as_sent(plant_conn: Conn) -> None:
    m = make_measurement(7)
    sent = json.loads(m.model_dump_json()) | {"order_ref": "PO-88"}  # a field we do not model
    assert write_measurement(plant_conn, json.dumps(sent).encode()) is Outcome.STORED
    row = plant_conn.execute(
        "SELECT id, station, seq, time_utc, job, club_id, verdict, total_weight_g, "
        "balance_point_in, swingweight, calibration_ids, payload FROM measurements"
    ).fetchone()
    assert row == (
        m.id, "bench-1", 7, m.time_utc, "LC-2417", "LCW-00007", "pass", m.total_weight_g,
        m.balance_point_in, m.swingweight, ["cal-beam-0-1"], sent,
    )  # fmt: skip
    station = plant_conn.execute(
        "SELECT first_seen_utc, last_seen_utc, status FROM stations"
    ).fetchone()
    assert station == (m.time_utc, m.time_utc, "unknown")


def test_the_same_measurement_twice_leaves_one_row(plant_conn: Conn) -> None:
    payload = make_measurement(1).model_dump_json()
    assert write_measurement(plant_conn, payload) is Outcome.STORED
    assert write_measurement(plant_conn, payload) is Outcome.DUPLICATE
    # Key order does not matter: the payload is compared as JSON, not as bytes.
    reordered = json.dumps(dict(reversed(json.loads(payload).items())))
    assert write_measurement(plant_conn, reordered) is Outcome.DUPLICATE
    assert _count(plant_conn, "measurements") == 1
    assert _count(plant_conn, "measurement_keys") == 1


def test_an_id_reused_with_other_content_is_refused_and_nothing_changes(plant_conn: Conn) -> None:
    m = make_measurement(1)
    write_measurement(plant_conn, m.model_dump_json())
    other = m.model_copy(update={"total_weight_g": 430.0})
    with pytest.raises(PayloadRefused, match=rf"measurement\.id: {m.id} is already stored"):
        write_measurement(plant_conn, other.model_dump_json())
    row = plant_conn.execute("SELECT total_weight_g FROM measurements").fetchone()
    assert row == (m.total_weight_g,)


@pytest.mark.parametrize(
    ("change", "message"),
    [
        ({"total_weight_g": None}, r"measurement\.total_weight_g: "),
        ({"seq": "seven"}, r"measurement\.seq: "),
        ({"seq": 0}, r"measurement\.seq: expected 1 or more"),
        ({"time_utc": "2026-11-30T08:15:02"}, r"measurement\.time_utc: needs a UTC offset"),
        ({"station": "bench/1"}, r"measurement\.station: expected a station name"),
        ({"id": "not-a-uuid"}, r"measurement\.id: "),
    ],
)
def test_a_bad_measurement_is_refused_naming_the_field(
    plant_conn: Conn, change: dict[str, Any], message: str
) -> None:
    payload = json.loads(make_measurement(1).model_dump_json()) | change
    with pytest.raises(PayloadRefused, match=message):
        write_measurement(plant_conn, json.dumps(payload))
    assert _count(plant_conn, "measurements") == 0
    assert _count(plant_conn, "stations") == 0


@pytest.mark.parametrize(
    ("payload", "message"),
    [
        (b"{not json", r"measurement: not valid JSON"),
        (b"[1, 2]", r"measurement: expected a JSON object, got list"),
        (b'{"total_weight_g": NaN}', r"measurement: NaN is not a JSON number"),
        (b"\xff\xfe", r"measurement: not valid JSON"),
    ],
)
def test_what_is_not_a_json_object_is_refused(
    plant_conn: Conn, payload: bytes, message: str
) -> None:
    with pytest.raises(PayloadRefused, match=message):
        write_measurement(plant_conn, payload)


def test_first_and_last_seen_follow_the_station_times_in_any_order(plant_conn: Conn) -> None:
    for seq in (5, 2, 9):
        write_measurement(plant_conn, make_measurement(seq).model_dump_json())
    row = plant_conn.execute("SELECT first_seen_utc, last_seen_utc FROM stations").fetchone()
    assert row == (T0 + timedelta(seconds=2), T0 + timedelta(seconds=9))


def test_alarm_changes_are_stored_once(plant_conn: Conn) -> None:
    raised, cleared = _alarm(), _alarm(active=False, time_utc="2026-11-30T08:16:00Z")
    assert write_alarm(plant_conn, json.dumps(raised)) is Outcome.STORED
    assert write_alarm(plant_conn, json.dumps(raised)) is Outcome.DUPLICATE
    assert write_alarm(plant_conn, json.dumps(cleared)) is Outcome.STORED
    rows = plant_conn.execute("SELECT key, active FROM alarm_changes ORDER BY time_utc").fetchall()
    assert rows == [("device_offline:scale", True), ("device_offline:scale", False)]


def test_an_alarm_kind_this_code_does_not_know_is_still_stored(plant_conn: Conn) -> None:
    newer = _alarm(kind="tilt", source="beam", key="tilt:beam")
    assert write_alarm(plant_conn, json.dumps(newer)) is Outcome.STORED


@pytest.mark.parametrize(
    ("change", "message"),
    [
        ({"key": "overload:scale"}, r"alarm\.key: expected .* \(device_offline:scale\)"),
        ({"active": "maybe"}, r"alarm\.active: "),
        ({"time_utc": "2026-11-30 08:15"}, r"alarm\.time_utc: needs a UTC offset"),
    ],
)
def test_a_bad_alarm_is_refused_naming_the_field(
    plant_conn: Conn, change: dict[str, Any], message: str
) -> None:
    with pytest.raises(PayloadRefused, match=message):
        write_alarm(plant_conn, json.dumps(_alarm(**change)))
    assert _count(plant_conn, "alarm_changes") == 0


def test_calibrations_are_stored_once_and_a_changed_one_is_refused(plant_conn: Conn) -> None:
    cal = make_calibration("beam/0", "span", T0)
    assert write_calibration(plant_conn, cal.model_dump_json()) is Outcome.STORED
    assert write_calibration(plant_conn, cal.model_dump_json()) is Outcome.DUPLICATE
    changed = cal.model_copy(update={"counts_per_g": 400.0})
    with pytest.raises(PayloadRefused, match=rf"calibration\.id: {cal.id} is already stored"):
        write_calibration(plant_conn, changed.model_dump_json())
    row = plant_conn.execute(
        "SELECT channel, kind, passed, payload->>'counts_per_g' FROM calibrations"
    )
    assert row.fetchall() == [("beam/0", "span", True, "412.5")]
    bad = json.loads(cal.model_dump_json()) | {"counts_per_g": "many"}
    with pytest.raises(PayloadRefused, match=r"calibration\.counts_per_g: "):
        write_calibration(plant_conn, json.dumps(bad))


def test_status_history_keeps_changes_only(plant_conn: Conn) -> None:
    t = T0
    assert write_status(plant_conn, "bench-1", b"online", t) is Outcome.STORED
    # The retained message again after a collector reconnect: not a change.
    assert (
        write_status(plant_conn, "bench-1", b"online", t + timedelta(minutes=5))
        is Outcome.DUPLICATE
    )
    assert (
        write_status(plant_conn, "bench-1", b"offline", t + timedelta(minutes=9)) is Outcome.STORED
    )
    # A late, older message does not overwrite the newer status.
    assert (
        write_status(plant_conn, "bench-1", "online", t + timedelta(minutes=7)) is Outcome.DUPLICATE
    )
    history = plant_conn.execute("SELECT status, time_utc FROM station_status ORDER BY time_utc")
    assert history.fetchall() == [("online", t), ("offline", t + timedelta(minutes=9))]
    row = plant_conn.execute(
        "SELECT status, status_since_utc, last_seen_utc FROM stations"
    ).fetchone()
    assert row == ("offline", t + timedelta(minutes=9), t + timedelta(minutes=9))
    with pytest.raises(PayloadRefused, match=r"status: expected 'online' or 'offline'"):
        write_status(plant_conn, "bench-1", b"sleeping", t)
    with pytest.raises(PayloadRefused, match=r"status\.time_utc: needs a UTC offset"):
        write_status(plant_conn, "bench-1", b"online", datetime(2026, 11, 30, 8, 0))


def test_refused_messages_are_kept_with_their_reason(plant_conn: Conn) -> None:
    payload = b'{"seq": "seven"}'
    try:
        write_measurement(plant_conn, payload)
    except PayloadRefused as err:
        write_refused(plant_conn, "heft/bench-1/measurement", payload, str(err))
    row = plant_conn.execute("SELECT topic, payload, reason FROM refused_messages").fetchone()
    assert row is not None
    assert row[:2] == ("heft/bench-1/measurement", payload)
    assert "measurement.seq" in row[2]


def test_the_writer_commits_its_own_transaction(pg_dsn: str) -> None:
    """Committed: another session sees the row at once. A caller's open transaction is refused."""
    with connect(pg_dsn) as c:
        migrate(c)
        write_measurement(c, make_measurement(1).model_dump_json())
    with psycopg.connect(pg_dsn) as other:
        assert _count(other, "measurements") == 1
        other.execute("SELECT 1")  # not autocommit: a transaction is now open
        with pytest.raises(PlantStoreError, match="open transaction"):
            write_measurement(other, make_measurement(2).model_dump_json())


def test_importing_the_plant_store_does_not_import_psycopg() -> None:
    """psycopg is loaded on the first connection only, not by importing (start-up time)."""
    code = (
        "import sys, heft.daemon.plant.writer, heft.daemon.plant.queries, "
        "heft.daemon.plant.migrations; print('psycopg' in sys.modules)"
    )
    done = subprocess.run(
        [sys.executable, "-c", code], capture_output=True, text=True, timeout=60, check=True
    )
    assert done.stdout.strip() == "False"
