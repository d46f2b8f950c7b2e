"""Durable storage: one SQLite file per station (stdlib ``sqlite3``).

What the file guarantees, and how:

* **Durable before published.** WAL journal with ``synchronous=FULL``: when ``add_measurement``
  returns, the commit is on disk (the WAL is fsync'd at every commit), and only then can the MQTT
  link see the row in the outbox.
* **Append-only measurement log.** Triggers abort any UPDATE or DELETE of ``measurements`` (and of
  ``calibrations``); the outbox and the alarm log are the only tables that change.
* **Outbox.** Each measurement is inserted together with an outbox row in one transaction; the MQTT
  link drains the outbox and marks a row sent only after the broker acknowledged it.
* **Versioned schema.** ``PRAGMA user_version`` counts the migrations applied; opening a file
  applies the missing ones, and a file newer than this code is refused with a clear error.

Errors: every ``sqlite3.Error`` (disk full, I/O error, locked, corrupt, ...) is re-raised as
:class:`StorageError` naming the file and the operation; the transaction is rolled back, so a
failed call stored nothing and can be retried with the same record.

Threading: one connection guarded by a lock, usable from any thread. Each call is one short
transaction; callers on an event loop may run them through ``asyncio.to_thread`` (the fsync of a
commit takes milliseconds on a healthy disk, but longer on SD cards).
"""

from __future__ import annotations

import contextlib
import sqlite3
import threading
from collections.abc import Iterator, Sequence
from datetime import UTC, datetime
from pathlib import Path
from typing import Any, Final

from heft.daemon.events import Alarm, AlarmKind
from heft.daemon.measurement import Measurement, Verdict
from heft.daemon.records import CalibrationRecord
from heft.daemon.storage_schema import MIGRATIONS, SCHEMA_VERSION

__all__ = ["MIGRATIONS", "SCHEMA_VERSION", "StorageError", "Store", "utc_text"]


class StorageError(Exception):
    """The database could not do what was asked; the message names the file and the operation."""


_PAGE_ROWS: Final = 500  # rows fetched per locked query while iterating


def utc_text(t: datetime) -> str:
    """A datetime as fixed-width ISO 8601 UTC text (naive values are taken as UTC)."""
    if t.tzinfo is None:
        t = t.replace(tzinfo=UTC)
    return t.astimezone(UTC).strftime("%Y-%m-%dT%H:%M:%S.%fZ")


def _parse_utc(text: str) -> datetime:
    return datetime.strptime(text, "%Y-%m-%dT%H:%M:%S.%fZ").replace(tzinfo=UTC)


class Store:
    """The station's database. Open with ``Store(path)``; close with ``close()`` or ``with``."""

    def __init__(self, path: str | Path) -> None:
        self.path = Path(path)
        self._lock = threading.Lock()
        try:
            # isolation_level=None: we issue BEGIN/COMMIT ourselves, so a transaction is exactly
            # what the code says; check_same_thread=False: the lock serialises all access.
            self._conn = sqlite3.connect(
                self.path, isolation_level=None, check_same_thread=False, timeout=10.0
            )
        except sqlite3.Error as err:
            raise StorageError(f"{self.path}: cannot open database: {err}") from err
        try:
            self._configure()
            self._migrate()
        except BaseException:
            self._conn.close()
            raise

    # ---------------------------------------------------------------- connection and schema

    def _configure(self) -> None:
        with self._op("configure"):
            mode = self._conn.execute("PRAGMA journal_mode=WAL").fetchone()[0]
            if str(mode).lower() != "wal":
                raise StorageError(f"{self.path}: journal_mode=WAL refused (got {mode!r})")
            self._conn.execute("PRAGMA synchronous=FULL")
            self._conn.execute("PRAGMA foreign_keys=ON")

    def _migrate(self) -> None:
        with self._op("migrate"):
            version = int(self._conn.execute("PRAGMA user_version").fetchone()[0])
            if version > SCHEMA_VERSION:
                raise StorageError(
                    f"{self.path}: schema version {version} is newer than this heft "
                    f"understands ({SCHEMA_VERSION}); use a newer heft"
                )
            for target in range(version + 1, SCHEMA_VERSION + 1):
                with self._transaction():
                    for statement in _split_sql(MIGRATIONS[target - 1]):
                        self._conn.execute(statement)
                    self._conn.execute(f"PRAGMA user_version={target}")

    def close(self) -> None:
        with self._lock:
            self._conn.close()

    def __enter__(self) -> Store:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    def _op(self, what: str) -> _Operation:
        return _Operation(self, what)

    def _query(self, what: str, sql: str, params: Sequence[Any] = ()) -> list[Any]:
        with self._lock, self._op(what):
            return self._conn.execute(sql, params).fetchall()

    def _write(self, what: str, statements: Sequence[tuple[str, Sequence[Any]]]) -> None:
        """Run statements as one transaction (all or nothing)."""
        with self._lock, self._op(what), self._transaction():
            for sql, params in statements:
                self._conn.execute(sql, params)

    @contextlib.contextmanager
    def _transaction(self) -> Iterator[None]:
        """BEGIN IMMEDIATE ... COMMIT, rolled back on any error (caller holds the lock)."""
        self._conn.execute("BEGIN IMMEDIATE")
        try:
            yield
            self._conn.execute("COMMIT")
        except BaseException:
            if self._conn.in_transaction:
                self._conn.execute("ROLLBACK")
            raise

    def pragma(self, name: str) -> Any:
        """Read one PRAGMA value (e.g. 'journal_mode', 'synchronous', 'user_version')."""
        if not name.isidentifier():
            raise StorageError(f"pragma name {name!r}: expected an identifier")
        rows = self._query(f"read pragma {name}", f"PRAGMA {name}")
        return rows[0][0] if rows else None

    def integrity_check(self) -> str:
        """SQLite's full integrity check: 'ok', or the problems it found, one per line.

        Damage bad enough to stop the check itself (SQLITE_CORRUPT) is returned as text too, so
        the answer is never 'ok' for a damaged file and never an exception for a readable one.
        """
        try:
            with self._lock:
                rows = self._conn.execute("PRAGMA integrity_check").fetchall()
        except sqlite3.DatabaseError as err:
            return f"check stopped: {err}"
        return "\n".join(str(r[0]) for r in rows)

    # ---------------------------------------------------------------- measurements and outbox

    def add_measurement(self, m: Measurement) -> None:
        """Store ``m`` and queue it for publishing, durably, in one transaction.

        Idempotent: adding a measurement whose id is already stored with the same content is a
        no-op, so a caller may retry after a ``StorageError`` without creating duplicates.

        Raises:
            StorageError: nothing was stored (disk full, I/O error, a different record with the
                same id or the same station and seq).
        """
        body = m.model_dump_json()
        with self._lock, self._op(f"store measurement {m.id} (seq {m.seq})"):
            existing = self._conn.execute(
                "SELECT body FROM measurements WHERE id = ?", (str(m.id),)
            ).fetchone()
            if existing is not None:
                if existing[0] == body:
                    return
                raise StorageError(
                    f"{self.path}: measurement {m.id} is already stored with different content"
                )
            with self._transaction():
                self._conn.execute(
                    "INSERT INTO measurements"
                    " (id, station, seq, time_utc, job, spec, club_id, verdict, body)"
                    " VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?)",
                    (
                        str(m.id),
                        m.station,
                        m.seq,
                        utc_text(m.time_utc),
                        m.job,
                        m.spec,
                        m.club_id,
                        m.verdict.value,
                        body,
                    ),
                )
                self._conn.execute(
                    "INSERT INTO outbox (measurement_id, created_utc) VALUES (?, ?)",
                    (str(m.id), utc_text(datetime.now(UTC))),
                )

    def next_seq(self, station: str) -> int:
        """The next unused sequence number of ``station`` (1 for a new station)."""
        rows = self._query(
            "read next seq", "SELECT MAX(seq) FROM measurements WHERE station = ?", (station,)
        )
        return int(rows[0][0] or 0) + 1

    def outbox_pending(self, limit: int = 100) -> list[tuple[int, Measurement]]:
        """Up to ``limit`` measurements not yet acknowledged by the broker, oldest first."""
        rows = self._query(
            "read outbox",
            "SELECT o.id, m.body FROM outbox o JOIN measurements m ON m.id = o.measurement_id"
            " WHERE o.sent_utc IS NULL ORDER BY o.id LIMIT ?",
            (limit,),
        )
        return [(int(oid), Measurement.model_validate_json(body)) for oid, body in rows]

    def outbox_count(self) -> int:
        """How many measurements wait to be published."""
        rows = self._query("count outbox", "SELECT COUNT(*) FROM outbox WHERE sent_utc IS NULL")
        return int(rows[0][0])

    def mark_sent(self, outbox_id: int) -> None:
        """Record that the broker acknowledged the outbox row (call only after PUBACK)."""
        self._write(
            f"mark outbox row {outbox_id} sent",
            [
                (
                    "UPDATE outbox SET sent_utc = ? WHERE id = ? AND sent_utc IS NULL",
                    (utc_text(datetime.now(UTC)), outbox_id),
                )
            ],
        )

    def measurements(
        self,
        since: datetime | None = None,
        until: datetime | None = None,
        job: str | None = None,
        verdict: Verdict | str | None = None,
        station: str | None = None,
    ) -> Iterator[Measurement]:
        """Stored measurements in insertion order, filtered; ``since`` inclusive, ``until`` not.

        Reads in pages, so the lock is never held while the caller works on a row.
        """
        where = ["row_id > ?"]
        params: list[Any] = []
        if since is not None:
            where.append("time_utc >= ?")
            params.append(utc_text(since))
        if until is not None:
            where.append("time_utc < ?")
            params.append(utc_text(until))
        if job is not None:
            where.append("job = ?")
            params.append(job)
        if verdict is not None:
            where.append("verdict = ?")
            params.append(Verdict(verdict).value)
        if station is not None:
            where.append("station = ?")
            params.append(station)
        sql = (
            f"SELECT row_id, body FROM measurements WHERE {' AND '.join(where)}"
            f" ORDER BY row_id LIMIT {_PAGE_ROWS}"
        )
        last = 0
        while True:
            rows = self._query("read measurements", sql, [last, *params])
            for row_id, body in rows:
                last = int(row_id)
                yield Measurement.model_validate_json(body)
            if len(rows) < _PAGE_ROWS:
                return

    def recent_measurements(self, n: int) -> list[Measurement]:
        """The ``n`` newest measurements, oldest of them first."""
        rows = self._query(
            "read recent measurements",
            "SELECT body FROM measurements ORDER BY row_id DESC LIMIT ?",
            (n,),
        )
        return [Measurement.model_validate_json(r[0]) for r in reversed(rows)]

    def measurement(self, measurement_id: str) -> Measurement | None:
        """One measurement by id, or None."""
        rows = self._query(
            "read measurement", "SELECT body FROM measurements WHERE id = ?", (measurement_id,)
        )
        return Measurement.model_validate_json(rows[0][0]) if rows else None

    # ---------------------------------------------------------------- calibrations

    def add_calibration(self, rec: CalibrationRecord) -> None:
        """Append a calibration record (append-only, like measurements)."""
        self._write(
            f"store calibration {rec.id}",
            [
                (
                    "INSERT INTO calibrations (id, station, channel, kind, time_utc, body)"
                    " VALUES (?, ?, ?, ?, ?, ?)",
                    (
                        rec.id,
                        rec.station,
                        rec.channel,
                        rec.kind,
                        utc_text(rec.time_utc),
                        rec.model_dump_json(),
                    ),
                )
            ],
        )

    def latest_calibration(self, channel: str, kind: str | None = None) -> CalibrationRecord | None:
        """The newest record of ``channel`` (of that ``kind`` if given), or None."""
        sql = "SELECT body FROM calibrations WHERE channel = ?"
        params: list[Any] = [channel]
        if kind is not None:
            sql += " AND kind = ?"
            params.append(kind)
        sql += " ORDER BY time_utc DESC, row_id DESC LIMIT 1"
        rows = self._query("read latest calibration", sql, params)
        return CalibrationRecord.model_validate_json(rows[0][0]) if rows else None

    def calibrations(self, channel: str | None = None) -> list[CalibrationRecord]:
        """All calibration records (of one channel if given), oldest first."""
        sql = "SELECT body FROM calibrations"
        params: list[Any] = []
        if channel is not None:
            sql += " WHERE channel = ?"
            params.append(channel)
        sql += " ORDER BY time_utc, row_id"
        return [
            CalibrationRecord.model_validate_json(r[0])
            for r in self._query("read calibrations", sql, params)
        ]

    # ---------------------------------------------------------------- alarms

    def record_alarm(self, alarm: Alarm) -> None:
        """Append one alarm change (raised, cleared or acknowledged) to the history."""
        self._write(
            f"record alarm {alarm.key}",
            [
                (
                    "INSERT INTO alarm_log"
                    " (station, key, kind, source, active, acknowledged, message, time_utc)"
                    " VALUES (?, ?, ?, ?, ?, ?, ?, ?)",
                    (
                        alarm.station,
                        alarm.key,
                        alarm.kind.value,
                        alarm.source,
                        int(alarm.active),
                        int(alarm.acknowledged),
                        alarm.message,
                        utc_text(alarm.time_utc),
                    ),
                )
            ],
        )

    def alarm_history(self, limit: int = 100) -> list[Alarm]:
        """The ``limit`` newest alarm changes, newest first."""
        rows = self._query(
            "read alarm history",
            f"SELECT {_ALARM_COLUMNS} FROM alarm_log ORDER BY row_id DESC LIMIT ?",
            (limit,),
        )
        return [_alarm_from_row(r) for r in rows]

    def active_alarms(self, station: str | None = None) -> list[Alarm]:
        """Alarms whose latest recorded change left them active (to restore state on start)."""
        sql = (
            f"SELECT {_ALARM_COLUMNS} FROM alarm_log WHERE row_id IN"
            " (SELECT MAX(row_id) FROM alarm_log GROUP BY station, key) AND active = 1"
        )
        params: list[Any] = []
        if station is not None:
            sql += " AND station = ?"
            params.append(station)
        return [
            _alarm_from_row(r)
            for r in self._query("read active alarms", sql + " ORDER BY row_id", params)
        ]


_ALARM_COLUMNS: Final = "station, kind, source, active, acknowledged, message, time_utc"


def _alarm_from_row(row: Sequence[Any]) -> Alarm:
    station, kind, source, active, acknowledged, message, time_utc = row
    return Alarm(
        station=station,
        kind=AlarmKind(kind),
        source=source,
        active=bool(active),
        message=message,
        time_utc=_parse_utc(time_utc),
        acknowledged=bool(acknowledged),
    )


def _split_sql(script: str) -> list[str]:
    """Split a migration into statements (trigger bodies contain ';', so use sqlite's own test)."""
    statements: list[str] = []
    current = ""
    for line in script.splitlines(keepends=True):
        current += line
        if sqlite3.complete_statement(current):
            if current.strip():
                statements.append(current.strip())
            current = ""
    if current.strip():
        raise StorageError(f"migration has an unterminated statement: {current.strip()[:60]!r}")
    return statements


class _Operation:
    """Context manager turning ``sqlite3.Error`` into ``StorageError`` naming file and operation."""

    def __init__(self, store: Store, what: str) -> None:
        self._store = store
        self._what = what

    def __enter__(self) -> None:
        return None

    def __exit__(
        self, exc_type: type[BaseException] | None, exc: BaseException | None, tb: object
    ) -> None:
        if isinstance(exc, sqlite3.Error):
            raise StorageError(f"{self._store.path}: {self._what} failed: {exc}") from exc
