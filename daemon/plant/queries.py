"""The plant's questions, answered from the plant store.

Which stations are online, when each was last heard from, how many clubs each measured since a
given time (the caller decides where the plant's day starts) and how many passed, which alarms
are active; and every measurement of a job or a customer order across all stations, exported in
the same CSV / JSON Lines formats as ``heft export`` on a station (heft.daemon.export).
"""

from __future__ import annotations

from collections.abc import Iterator
from dataclasses import dataclass
from datetime import datetime
from typing import TYPE_CHECKING, Any, TextIO

from heft.daemon.export import FORMATS
from heft.daemon.measurement import Measurement

if TYPE_CHECKING:
    from psycopg import Connection

# near_limit is inside the spec (only close to a limit): it passes. no_spec was not judged.
_PASSED = ("pass", "near_limit")
_JUDGED = ("pass", "near_limit", "fail")

_LATEST_ALARMS = """
SELECT DISTINCT ON (station, key) station, key, kind, source, active, acknowledged, message,
       time_utc
FROM alarm_changes
ORDER BY station, key, time_utc DESC, received_utc DESC
"""

_SUMMARIES = f"""
WITH clubs AS (
    SELECT station,
           count(*) AS clubs,
           count(*) FILTER (WHERE verdict = ANY (%(judged)s)) AS judged,
           count(*) FILTER (WHERE verdict = ANY (%(passed)s)) AS passed
    FROM measurements
    WHERE time_utc >= %(since)s
    GROUP BY station
), alarms AS (
    SELECT station, count(*) AS active FROM ({_LATEST_ALARMS}) AS latest
    WHERE active GROUP BY station
)
SELECT s.station, s.status, s.last_seen_utc, coalesce(c.clubs, 0), coalesce(c.judged, 0),
       coalesce(c.passed, 0), coalesce(a.active, 0)
FROM stations s LEFT JOIN clubs c USING (station) LEFT JOIN alarms a USING (station)
ORDER BY s.station
"""


@dataclass(frozen=True)
class StationSummary:
    station: str
    status: str  # online | offline | unknown (no status message seen yet)
    last_seen_utc: datetime
    clubs: int  # measured since the time asked for
    judged: int  # of those, judged against a spec
    passed: int  # of those judged, inside the spec
    active_alarms: int

    @property
    def online(self) -> bool:
        return self.status == "online"

    @property
    def pass_rate(self) -> float | None:
        """Passed / judged; None when nothing was judged (no spec is not a failure)."""
        return self.passed / self.judged if self.judged else None


@dataclass(frozen=True)
class ActiveAlarm:
    station: str
    key: str
    kind: str
    source: str
    acknowledged: bool
    message: str
    since_utc: datetime  # time of the latest change (raised, or acknowledged while active)


def station_summaries(conn: Connection[Any], since_utc: datetime) -> list[StationSummary]:
    """Every station the plant has heard from, with its counts since ``since_utc``."""
    rows = conn.execute(
        _SUMMARIES.encode(), {"since": since_utc, "judged": list(_JUDGED), "passed": list(_PASSED)}
    ).fetchall()
    return [StationSummary(*row) for row in rows]


def active_alarms(conn: Connection[Any], station: str | None = None) -> list[ActiveAlarm]:
    """Alarms whose latest change left them active, oldest first."""
    rows = conn.execute(
        f"SELECT station, key, kind, source, acknowledged, message, time_utc "
        f"FROM ({_LATEST_ALARMS}) AS latest WHERE active "
        f"AND (%(station)s::text IS NULL OR station = %(station)s) "
        f"ORDER BY time_utc, station, key".encode(),
        {"station": station},
    ).fetchall()
    return [ActiveAlarm(*row) for row in rows]


def measurements_of(
    conn: Connection[Any], *, job: str | None = None, order_ref: str | None = None
) -> Iterator[Measurement]:
    """Every measurement of a job, or of a customer order (``order_ref`` in the payload), from
    all stations, by capture time. Streams through a server-side cursor: a job may be large."""
    if (job is None) == (order_ref is None):
        raise ValueError("give exactly one of job or order_ref")
    where = b"job = %(v)s" if job is not None else b"payload ->> 'order_ref' = %(v)s"
    with conn.transaction(), conn.cursor(name="heft_plant_export") as cursor:
        cursor.execute(
            b"SELECT payload FROM measurements WHERE "
            + where
            + b" ORDER BY time_utc, station, seq",
            {"v": job if job is not None else order_ref},
        )
        for (payload,) in cursor:
            yield Measurement.model_validate(payload)


def export(
    conn: Connection[Any],
    out: TextIO,
    fmt: str,
    *,
    job: str | None = None,
    order_ref: str | None = None,
) -> int:
    """Write a job's or an order's measurements as ``csv`` or ``jsonl``; returns the row count."""
    try:
        write = FORMATS[fmt]
    except KeyError:
        raise ValueError(f"format: expected one of {', '.join(FORMATS)}, got {fmt!r}") from None
    return write(measurements_of(conn, job=job, order_ref=order_ref), out)
