"""The plant's questions against a real PostgreSQL filled through the writer (invented data)."""

from __future__ import annotations

import csv
import io
import json
from datetime import timedelta
from typing import Any

import psycopg
import pytest

from heft.daemon.measurement import Measurement, Verdict
from heft.daemon.plant.queries import (
    active_alarms,
    export,
    measurements_of,
    station_summaries,
)
from heft.daemon.plant.writer import write_alarm, write_measurement, write_status
from tests.sample_records import T0, make_measurement

Conn = psycopg.Connection[Any]
DAY = T0.replace(hour=0)  # the plant's day starts at midnight UTC in these tests


def _store(
    conn: Conn, seq: int, station: str, extra: dict[str, Any] | None = None, **kw: Any
) -> Measurement:
    m = make_measurement(seq, station=station, **kw)
    write_measurement(conn, json.dumps(json.loads(m.model_dump_json()) | (extra or {})))
    return m


def _alarm(
    conn: Conn, station: str, source: str, active: bool, minute: int, ack: bool = False
) -> None:
    write_alarm(
        conn,
        json.dumps(
            {
                "station": station,
                "key": f"device_offline:{source}",
                "kind": "device_offline",
                "source": source,
                "active": active,
                "acknowledged": ack,
                "message": f"{source} offline" if active else f"{source} back",
                "time_utc": (T0 + timedelta(minutes=minute)).isoformat(),
            }
        ),
    )


@pytest.fixture
def plant(plant_conn: Conn) -> Conn:
    """Two benches of Larkspur Clubworks: one online with a day of clubs, one gone offline."""
    _store(plant_conn, 1, "bench-1", time_utc=DAY - timedelta(hours=2))  # yesterday
    _store(plant_conn, 2, "bench-1", verdict=Verdict.PASS)
    _store(plant_conn, 3, "bench-1", verdict=Verdict.NEAR_LIMIT)
    _store(plant_conn, 4, "bench-1", verdict=Verdict.FAIL)
    _store(plant_conn, 5, "bench-1", verdict=Verdict.NO_SPEC, job=None)
    _store(plant_conn, 1, "bench-2", extra={"order_ref": "PO-88"})
    _store(plant_conn, 2, "bench-2", job="LC-2420", extra={"order_ref": "PO-88"})
    write_status(plant_conn, "bench-1", b"online", T0)
    write_status(plant_conn, "bench-2", b"online", T0)
    write_status(plant_conn, "bench-2", b"offline", T0 + timedelta(minutes=30))
    _alarm(plant_conn, "bench-1", "scale", True, 1)
    _alarm(plant_conn, "bench-1", "scale", True, 2, ack=True)  # acknowledged, still active
    _alarm(plant_conn, "bench-1", "beam", True, 3)
    _alarm(plant_conn, "bench-1", "beam", False, 4)  # cleared
    _alarm(plant_conn, "bench-2", "beam", True, 5)
    return plant_conn


def test_station_summaries(plant: Conn) -> None:
    one, two = station_summaries(plant, since_utc=DAY)
    assert (one.station, one.online, one.clubs, one.judged, one.passed) == (
        "bench-1",
        True,
        4,
        3,
        2,
    )
    assert one.pass_rate == pytest.approx(2 / 3)  # pass and near_limit pass; no_spec not judged
    assert one.active_alarms == 1
    assert one.last_seen_utc == T0 + timedelta(minutes=4)  # the newest message: the clear
    assert (two.station, two.status, two.clubs, two.passed, two.active_alarms) == (
        "bench-2", "offline", 2, 2, 1,
    )  # fmt: skip
    assert two.last_seen_utc == T0 + timedelta(minutes=30)


def test_a_station_with_nothing_judged_has_no_pass_rate(plant: Conn) -> None:
    later = station_summaries(plant, since_utc=T0 + timedelta(days=1))
    assert [(s.clubs, s.pass_rate) for s in later] == [(0, None), (0, None)]


def test_active_alarms_are_the_latest_change_of_each_key(plant: Conn) -> None:
    alarms = active_alarms(plant)
    assert [(a.station, a.key, a.acknowledged) for a in alarms] == [
        ("bench-1", "device_offline:scale", True),
        ("bench-2", "device_offline:beam", False),
    ]
    assert alarms[0].since_utc == T0 + timedelta(minutes=2)
    assert [a.station for a in active_alarms(plant, "bench-2")] == ["bench-2"]


def test_a_job_across_stations_in_capture_order(plant: Conn) -> None:
    rows = [(m.station, m.seq) for m in measurements_of(plant, job="LC-2417")]
    # bench-1 seq 5 has no job; bench-2 seq 2 is another job; yesterday's seq 1 is included.
    assert rows == [("bench-1", 1), ("bench-2", 1), ("bench-1", 2), ("bench-1", 3), ("bench-1", 4)]


def test_an_order_is_found_through_the_payload(plant: Conn) -> None:
    found = [(m.station, m.seq, m.job) for m in measurements_of(plant, order_ref="PO-88")]
    assert found == [("bench-2", 1, "LC-2417"), ("bench-2", 2, "LC-2420")]


def test_export_csv_and_jsonl_match_the_station_formats(plant: Conn) -> None:
    out = io.StringIO()
    assert export(plant, out, "csv", job="LC-2417") == 5
    rows = list(csv.DictReader(io.StringIO(out.getvalue())))
    assert [(r["station"], r["seq"], r["verdict"]) for r in rows][:2] == [
        ("bench-1", "1", "pass"),
        ("bench-2", "1", "pass"),
    ]
    out = io.StringIO()
    assert export(plant, out, "jsonl", order_ref="PO-88") == 2
    lines = out.getvalue().splitlines()
    assert [Measurement.model_validate_json(line).seq for line in lines] == [1, 2]


def test_export_refuses_unclear_requests(plant: Conn) -> None:
    with pytest.raises(ValueError, match="format: expected one of csv, jsonl"):
        export(plant, io.StringIO(), "xlsx", job="LC-2417")
    with pytest.raises(ValueError, match="exactly one of job or order_ref"):
        list(measurements_of(plant))
    with pytest.raises(ValueError, match="exactly one of job or order_ref"):
        list(measurements_of(plant, job="LC-2417", order_ref="PO-88"))
