"""Read the records a report needs from a station's store."""

from __future__ import annotations

from datetime import datetime, tzinfo

from heft.daemon.report.model import Report, build_report
from heft.daemon.storage import Store


def selection_text(
    *,
    job: str | None,
    station: str | None,
    since: datetime | None,
    until: datetime | None,
    tz: tzinfo,
) -> list[str]:
    """How the records were chosen, as the header prints it (only the filters given)."""
    parts: list[str] = []
    if job is not None:
        parts.append(f"job {job}")
    if station is not None:
        parts.append(f"station {station}")
    if since is not None:
        parts.append(f"from {since.astimezone(tz):%Y-%m-%d %H:%M}")
    if until is not None:
        parts.append(f"until {until.astimezone(tz):%Y-%m-%d %H:%M} (not included)")
    return parts


def report_from_store(
    store: Store,
    *,
    tz: tzinfo,
    tz_name: str,
    generated_utc: datetime,
    generator: str,
    job: str | None = None,
    station: str | None = None,
    since: datetime | None = None,
    until: datetime | None = None,
) -> Report | None:
    """The report of the stored measurements that match; None when none does."""
    measurements = list(
        store.measurements(since=since, until=until, job=job, station=station)
    )
    return build_report(
        measurements,
        store.calibrations(),
        tz=tz,
        tz_name=tz_name,
        generated_utc=generated_utc,
        generator=generator,
        selection=selection_text(job=job, station=station, since=since, until=until, tz=tz),
    )
