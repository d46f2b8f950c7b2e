"""Writing station messages into the plant store: one message, one committed transaction.

Every writer is idempotent, because MQTT QoS 1 delivers at least once: writing the same message
again returns ``Outcome.DUPLICATE`` and changes nothing. A measurement or calibration id that
comes back with *different* content is refused (``PayloadRefused``): the station promises a
repeat is byte-for-byte the same, so this is a fault to look at, not a newer version to keep.
A refused message can be kept with its reason by ``write_refused``, so nothing is silently lost.

The caller acknowledges the message to the broker only after the writer returned: then the row is
committed (see docs/plant.md, "Acknowledging after the commit").
"""

from __future__ import annotations

import enum
from collections.abc import Mapping
from datetime import datetime
from typing import TYPE_CHECKING, Any

from heft.daemon.plant.db import require_idle
from heft.daemon.plant.payloads import (
    Payload,
    PayloadRefused,
    parse_alarm,
    parse_calibration,
    parse_measurement,
    parse_status,
)

if TYPE_CHECKING:
    from psycopg import Connection


class Outcome(enum.StrEnum):
    STORED = "stored"
    DUPLICATE = "duplicate"  # already stored (a redelivery); nothing changed


_SEEN = """
INSERT INTO stations (station, first_seen_utc, last_seen_utc) VALUES (%(station)s, %(t)s, %(t)s)
ON CONFLICT (station) DO UPDATE SET
    first_seen_utc = least(stations.first_seen_utc, excluded.first_seen_utc),
    last_seen_utc = greatest(stations.last_seen_utc, excluded.last_seen_utc)
"""

_MEASUREMENT_COLUMNS = (
    "id", "station", "seq", "time_utc", "job", "club_id", "spec", "club", "verdict",
    "total_weight_g", "total_weight_g_u", "balance_point_in", "balance_point_in_u",
    "moment_g_in", "moment_g_in_u", "moment_oz_in", "moment_oz_in_u",
    "swingweight", "swingweight_points", "swingweight_points_u",
    "calibration_ids", "software_version", "payload",
)  # fmt: skip


def _seen(conn: Connection[Any], station: str, time_utc: datetime) -> None:
    conn.execute(_SEEN, {"station": station, "t": time_utc})


def _insert_once(conn: Connection[Any], table: str, values: Mapping[str, Any]) -> bool:
    """Insert one row unless a row with its key exists; whether it was inserted."""
    from psycopg import sql

    query = sql.SQL("INSERT INTO {} ({}) VALUES ({}) ON CONFLICT DO NOTHING RETURNING 1").format(
        sql.Identifier(table),
        sql.SQL(", ").join(map(sql.Identifier, values)),
        sql.SQL(", ").join(map(sql.Placeholder, values)),
    )
    return conn.execute(query, values).fetchone() is not None


def _repeat(
    conn: Connection[Any], stored_payload: bytes, what: str, key: Any, obj: Mapping[str, Any]
) -> Outcome:
    """A record whose id is already stored: a redelivery if the payload is the same JSON."""
    from psycopg.types.json import Jsonb

    row = conn.execute(stored_payload, {"key": key, "payload": Jsonb(obj)}).fetchone()
    if row and row[0]:  # jsonb equality: the same JSON whatever the key order
        return Outcome.DUPLICATE
    raise PayloadRefused(
        f"{what}.id: {key} is already stored with different content "
        "(a station repeats a record byte for byte)"
    )


def write_measurement(conn: Connection[Any], payload: Payload) -> Outcome:
    """Store one measurement message (validated with heft.daemon.measurement.Measurement)."""
    from psycopg.types.json import Jsonb

    record, obj = parse_measurement(payload)
    key = record.model_dump(include={"id", "station", "seq", "time_utc"})
    require_idle(conn)
    with conn.transaction():
        conn.execute("SELECT plant_ensure_month_partition(%s)", (record.time_utc,))
        _seen(conn, record.station, record.time_utc)
        if not _insert_once(conn, "measurement_keys", key):
            return _repeat(
                conn,
                b"SELECT m.payload = %(payload)s FROM measurements m "
                b"JOIN measurement_keys k ON k.id = m.id AND k.time_utc = m.time_utc "
                b"WHERE k.id = %(key)s",
                "measurement",
                record.id,
                obj,
            )
        row = record.model_dump(include=set(_MEASUREMENT_COLUMNS))
        row |= {"verdict": record.verdict.value, "payload": Jsonb(obj)}
        _insert_once(conn, "measurements", {c: row[c] for c in _MEASUREMENT_COLUMNS})
    return Outcome.STORED


def write_alarm(conn: Connection[Any], payload: Payload) -> Outcome:
    """Store one alarm change (the ``S/alarm/event`` payload)."""
    from psycopg.types.json import Jsonb

    record, obj = parse_alarm(payload)
    require_idle(conn)
    with conn.transaction():
        _seen(conn, record.station, record.time_utc)
        row = record.model_dump() | {"payload": Jsonb(obj)}
        stored = _insert_once(conn, "alarm_changes", row)
    return Outcome.STORED if stored else Outcome.DUPLICATE


def write_calibration(conn: Connection[Any], payload: Payload) -> Outcome:
    """Store one calibration record (heft.daemon.records.CalibrationRecord)."""
    from psycopg.types.json import Jsonb

    record, obj = parse_calibration(payload)
    columns = {"id", "station", "channel", "kind", "time_utc", "passed", "next_due"}
    require_idle(conn)
    with conn.transaction():
        _seen(conn, record.station, record.time_utc)
        row = record.model_dump(include=columns) | {"payload": Jsonb(obj)}
        if not _insert_once(conn, "calibrations", row):
            return _repeat(
                conn,
                b"SELECT payload = %(payload)s FROM calibrations WHERE id = %(key)s",
                "calibration",
                record.id,
                obj,
            )
    return Outcome.STORED


def write_status(
    conn: Connection[Any], station: str, status: bytes | str, time_utc: datetime
) -> Outcome:
    """Record a station's availability (``S/status``: online/offline) received at ``time_utc``.

    The message carries no time or id and is retained, so a collector sees it again after every
    reconnect: only a *change* of status makes a history row; a repeat is a DUPLICATE. A message
    older than the status already recorded does not overwrite it.
    """
    value = parse_status(station, status, time_utc)
    require_idle(conn)
    with conn.transaction():
        _seen(conn, station, time_utc)
        changed = conn.execute(
            "UPDATE stations SET status = %(status)s, status_since_utc = %(t)s "
            "WHERE station = %(station)s AND status <> %(status)s "
            "AND (status_since_utc IS NULL OR status_since_utc <= %(t)s) RETURNING 1",
            {"station": station, "status": value, "t": time_utc},
        ).fetchone()
        if changed is None:
            return Outcome.DUPLICATE
        conn.execute(
            "INSERT INTO station_status (station, time_utc, status) VALUES (%s, %s, %s) "
            "ON CONFLICT DO NOTHING",
            (station, time_utc, value),
        )
    return Outcome.STORED


def write_refused(conn: Connection[Any], topic: str, payload: bytes, reason: str) -> None:
    """Keep a message the writers refused, with the reason, for someone to look at."""
    require_idle(conn)
    with conn.transaction():
        conn.execute(
            "INSERT INTO refused_messages (topic, payload, reason) VALUES (%s, %s, %s)",
            (topic, payload, reason),
        )


__all__ = [
    "Outcome",
    "PayloadRefused",
    "write_alarm",
    "write_calibration",
    "write_measurement",
    "write_refused",
    "write_status",
]
