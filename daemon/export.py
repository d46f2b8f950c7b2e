"""Stored measurements as CSV (a flat summary for spreadsheets) or JSON Lines (full records).

JSON Lines carries each measurement exactly as it is stored and published on MQTT, one object
per line. CSV keeps one row per club: every scalar field, the calibration ids joined with ';',
and the spec checks as ``check:verdict`` pairs; per-channel window statistics are only in JSONL.
"""

from __future__ import annotations

import csv
from collections.abc import Callable, Iterable
from typing import Any, Final, TextIO

from heft.daemon.measurement import Measurement

LIST_SEPARATOR: Final = ";"
# Text that a spreadsheet would run as a formula if a cell starts with it (CSV injection,
# OWASP): a club id is operator- or scanner-supplied, so such cells get a leading apostrophe.
_FORMULA_START: Final = ("=", "+", "-", "@", "\t", "\r")
_LIST_FIELDS: Final = ("channels", "calibration_ids", "checks")

CSV_COLUMNS: Final[tuple[str, ...]] = (
    *(name for name in Measurement.model_fields if name not in _LIST_FIELDS),
    "calibration_ids",
    "checks",
)


def _cell(value: Any) -> Any:
    if isinstance(value, str) and value.startswith(_FORMULA_START):
        return "'" + value
    return value


def csv_row(m: Measurement) -> dict[str, Any]:
    """One measurement as a CSV row keyed by ``CSV_COLUMNS``."""
    data = m.model_dump(mode="json", exclude=set(_LIST_FIELDS))
    row = {k: _cell(v) for k, v in data.items()}
    row["calibration_ids"] = _cell(LIST_SEPARATOR.join(m.calibration_ids))
    row["checks"] = LIST_SEPARATOR.join(f"{c.check}:{c.verdict.value}" for c in m.checks)
    return row


def write_csv(measurements: Iterable[Measurement], out: TextIO) -> int:
    """Write a header and one row per measurement; return the number of rows."""
    writer = csv.DictWriter(out, fieldnames=CSV_COLUMNS, lineterminator="\n")
    writer.writeheader()
    n = 0
    for m in measurements:
        writer.writerow(csv_row(m))
        n += 1
    return n


def write_jsonl(measurements: Iterable[Measurement], out: TextIO) -> int:
    """Write one JSON object per line (the MQTT payload); return the number of lines."""
    n = 0
    for m in measurements:
        out.write(m.model_dump_json())
        out.write("\n")
        n += 1
    return n


FORMATS: Final[dict[str, Callable[[Iterable[Measurement], TextIO], int]]] = {
    "csv": write_csv,
    "jsonl": write_jsonl,
}
