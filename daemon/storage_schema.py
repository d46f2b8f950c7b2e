"""The station database's schema, as the migrations that build it (applied by heft.daemon.storage).

``PRAGMA user_version`` counts the migrations a file has had; opening a file applies the rest.
"""

from __future__ import annotations

from typing import Final


def _append_only(table: str) -> str:
    """Triggers that abort any UPDATE or DELETE of ``table`` (the message names the table)."""
    return "".join(
        f"CREATE TRIGGER {table}_no_{op.lower()} BEFORE {op} ON {table}\n"
        f"BEGIN SELECT RAISE(ABORT, '{table} are append-only: {op} refused'); END;\n"
        for op in ("UPDATE", "DELETE")
    )


# Each entry moves the schema from version i to i + 1. Never edit a released entry: append one.
MIGRATIONS: Final[tuple[str, ...]] = (
    # 1: measurements (append-only), outbox, calibrations (append-only), alarm log.
    """
    CREATE TABLE measurements (
        row_id     INTEGER PRIMARY KEY,
        id         TEXT NOT NULL UNIQUE,
        station    TEXT NOT NULL,
        seq        INTEGER NOT NULL,
        time_utc   TEXT NOT NULL,  -- ISO 8601, UTC, fixed width: sorts as text
        job        TEXT,
        spec       TEXT,
        club_id    TEXT,
        verdict    TEXT NOT NULL,
        body       TEXT NOT NULL,  -- the Measurement as JSON (the MQTT payload)
        UNIQUE (station, seq)
    );
    CREATE INDEX measurements_time ON measurements (time_utc);
    CREATE INDEX measurements_job ON measurements (job, time_utc);
    """
    + _append_only("measurements")
    + """

    CREATE TABLE outbox (
        id             INTEGER PRIMARY KEY,
        measurement_id TEXT NOT NULL REFERENCES measurements (id),
        created_utc    TEXT NOT NULL,
        sent_utc       TEXT
    );
    CREATE INDEX outbox_pending ON outbox (id) WHERE sent_utc IS NULL;

    CREATE TABLE calibrations (
        row_id   INTEGER PRIMARY KEY,
        id       TEXT NOT NULL UNIQUE,
        station  TEXT NOT NULL,
        channel  TEXT NOT NULL,
        kind     TEXT NOT NULL,
        time_utc TEXT NOT NULL,
        body     TEXT NOT NULL
    );
    CREATE INDEX calibrations_channel ON calibrations (channel, kind, time_utc);
    """
    + _append_only("calibrations")
    + """

    CREATE TABLE alarm_log (
        row_id       INTEGER PRIMARY KEY,
        station      TEXT NOT NULL,
        key          TEXT NOT NULL,
        kind         TEXT NOT NULL,
        source       TEXT NOT NULL,
        active       INTEGER NOT NULL,
        acknowledged INTEGER NOT NULL,
        message      TEXT NOT NULL,
        time_utc     TEXT NOT NULL
    );
    CREATE INDEX alarm_log_key ON alarm_log (station, key, row_id);
    """,
)

SCHEMA_VERSION: Final = len(MIGRATIONS)
