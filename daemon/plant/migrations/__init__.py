"""The plant store's schema, as numbered SQL migrations applied in order.

The files ``NNNN_<name>.sql`` beside this module are the schema's history: version N is every file
up to ``N`` applied in order. ``migrate`` applies the missing ones, each in its own transaction with
its row in ``schema_version``, so a failed migration leaves the database at the previous version.
Re-running is harmless. A database newer than this code (another collector upgraded first) is
refused rather than written with an older idea of the tables, and so is a database whose applied
migrations differ from the files (someone edited a migration after it ran).
"""

from __future__ import annotations

import hashlib
import re
from dataclasses import dataclass
from importlib import resources
from typing import TYPE_CHECKING, Any

from heft.daemon.plant.db import PlantStoreError, require_idle

if TYPE_CHECKING:
    from psycopg import Connection

_FILE = re.compile(r"^(\d{4})_([a-z0-9_]+)\.sql$")

# One advisory lock for all schema work: two collectors starting at once migrate one after the
# other (the second finds nothing left to do). The number is arbitrary but fixed.
_LOCK_KEY = 0x68656674  # "heft"

_VERSION_TABLE = """
CREATE TABLE IF NOT EXISTS schema_version (
    version     int PRIMARY KEY,
    name        text NOT NULL,
    sha256      text NOT NULL,
    applied_utc timestamptz NOT NULL DEFAULT now()
)
"""


class SchemaError(PlantStoreError):
    """The database's schema cannot be used or brought up to date by this code."""


@dataclass(frozen=True)
class Migration:
    version: int
    name: str
    sql: str

    @property
    def sha256(self) -> str:
        return hashlib.sha256(self.sql.encode()).hexdigest()


def available() -> list[Migration]:
    """Every migration shipped with this code, by version; the versions run 1, 2, ... N."""
    found: list[Migration] = []
    for entry in resources.files(__name__).iterdir():
        match = _FILE.match(entry.name)
        if match:
            found.append(Migration(int(match[1]), match[2], entry.read_text(encoding="utf-8")))
    found.sort(key=lambda m: m.version)
    for expected, migration in enumerate(found, start=1):
        if migration.version != expected:
            raise SchemaError(
                f"migration {expected:04d} is missing (found {migration.version:04d})"
            )
    return found


def latest_version() -> int:
    return len(available())


def current_version(conn: Connection[Any]) -> int:
    """The schema version of the database: 0 for an empty one."""
    row = conn.execute("SELECT to_regclass('schema_version') IS NOT NULL").fetchone()
    if row is None or not row[0]:
        return 0
    row = conn.execute("SELECT coalesce(max(version), 0) FROM schema_version").fetchone()
    return int(row[0]) if row else 0


def migrate(conn: Connection[Any]) -> list[int]:
    """Bring the database up to this code's schema; returns the versions applied now."""
    require_idle(conn)
    migrations = available()
    applied_now: list[int] = []
    with conn.transaction():
        conn.execute("SELECT pg_advisory_xact_lock(%s)", (_LOCK_KEY,))
        conn.execute(_VERSION_TABLE)
        _check_applied(conn, migrations)
    for migration in migrations:
        with conn.transaction():
            conn.execute("SELECT pg_advisory_xact_lock(%s)", (_LOCK_KEY,))
            # Read again under the lock: another process may have applied it meanwhile.
            if current_version(conn) >= migration.version:
                continue
            conn.execute(migration.sql.encode())
            conn.execute(
                "INSERT INTO schema_version (version, name, sha256) VALUES (%s, %s, %s)",
                (migration.version, migration.name, migration.sha256),
            )
            applied_now.append(migration.version)
    return applied_now


def check(conn: Connection[Any]) -> None:
    """Raise SchemaError unless the database is exactly at this code's schema version."""
    have, want = current_version(conn), latest_version()
    if have > want:
        _check_applied(conn, available())
    if have != want:
        raise SchemaError(
            f"the plant database is at schema version {have}, this heft needs {want}: "
            "run the migrations (heft.daemon.plant.migrations.migrate)"
        )


def _check_applied(conn: Connection[Any], migrations: list[Migration]) -> None:
    rows = conn.execute("SELECT version, name, sha256 FROM schema_version ORDER BY version")
    known = {m.version: m for m in migrations}
    for version, name, sha256 in rows.fetchall():
        migration = known.get(version)
        if migration is None:
            raise SchemaError(
                f"the plant database is at schema version {version} ({name}), newer than this "
                f"heft (which knows up to {len(migrations)}): upgrade heft before using it"
            )
        if sha256 != migration.sha256:
            raise SchemaError(
                f"migration {version:04d}_{name} differs from the one applied to this database "
                "(edited after it ran?); restore the original file and add a new migration"
            )
