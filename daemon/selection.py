"""What an operator selects for the next club, checked against the config (pure).

Job, spec and club, the next club's id, and (single-scale stations) its balance point; the
pipeline holds the current choice, these functions say whether a new one is valid and why not.
"""

from __future__ import annotations

from heft.daemon.config import StationConfig
from heft.drivers.units import UnitError, parse_quantity

BALANCE_POINT_RANGE_IN = (0.0, 60.0)  # open interval: longer than any club, so a typo shows


class SelectionError(ValueError):
    """A job, spec, club or balance point that cannot be selected; the message says why."""


def spec_of_job(config: StationConfig, job: str) -> str:
    """The spec ``job`` uses; SelectionError naming the jobs when there is no such job."""
    if job not in config.jobs:
        raise SelectionError(f"no job {job!r}; jobs: {', '.join(sorted(config.jobs))}")
    return config.jobs[job].spec


def check_spec(config: StationConfig, spec: str, club: str | None) -> None:
    """SelectionError unless ``spec`` exists and (when given) has a target for ``club``."""
    found = config.specs.get(spec)
    if found is None:
        raise SelectionError(
            f"no spec {spec!r}; specs: {', '.join(sorted(config.specs)) or 'none'}"
        )
    if club is not None and found.clubs and club not in found.clubs:
        raise SelectionError(
            f"spec {spec!r} has no club {club!r}; clubs: {', '.join(sorted(found.clubs))}"
        )


def clean_club_id(club_id: str) -> str:
    if not club_id.strip():
        raise SelectionError("club_id must not be empty")
    return club_id.strip()


def balance_point_in(value: str | float) -> float:
    """An entered balance point in inches (text may carry a unit: ``"742mm"``)."""
    try:
        bp = parse_quantity(value, kind="length") if isinstance(value, str) else float(value)
    except UnitError as err:
        raise SelectionError(str(err)) from None
    low, high = BALANCE_POINT_RANGE_IN
    if not low < bp < high:
        raise SelectionError(f"balance point {bp:g} in is not between {low:g} and {high:g} in")
    return bp


def split_tag(text: str, prefix: str) -> tuple[str | None, str | None]:
    """A single-scale station's scanner tag as (club id, balance point text), either None.

    Tags read ``BP:29.25in`` (a balance point), ``LCW-0001`` (a club id) or both,
    ``LCW-0001 BP:29.25in`` (a traveller card carrying the id and the knife-edge reading).
    """
    if text.startswith(prefix):
        return None, text[len(prefix) :]
    head, found, tail = text.rpartition(" " + prefix)
    return (head.strip(), tail) if found else (text, None)
