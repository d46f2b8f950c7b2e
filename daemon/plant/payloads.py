"""Checking what a station sent before it is stored: pure functions, no database.

Each ``parse_*`` takes the message as received (bytes or text of JSON, or an already decoded
mapping) and returns the validated record together with the JSON object as sent (stored verbatim
in the ``payload`` column, so a field this code does not know yet, e.g. ``order_ref``, survives).
Anything that does not fit raises ``PayloadRefused`` with a message that names the field.
"""

from __future__ import annotations

import json
from collections.abc import Mapping
from datetime import datetime
from typing import Any, Literal, TypeVar

from pydantic import BaseModel, ConfigDict, ValidationError

from heft.daemon.config import problem_lines
from heft.daemon.measurement import Measurement
from heft.daemon.records import CalibrationRecord

Payload = bytes | str | Mapping[str, Any]
Availability = Literal["online", "offline"]
_M = TypeVar("_M", bound=BaseModel)


class PayloadRefused(ValueError):
    """A message the plant store will not take; the text names the field and what was expected."""


class AlarmChange(BaseModel):
    """One alarm raise, clear or acknowledgement as published on ``S/alarm/event``.

    The wire contract of docs/mqtt.md. ``kind`` is any text, not a closed list: a newer station
    may raise a kind this collector does not know yet, and its alarms must still be stored.
    """

    model_config = ConfigDict(frozen=True)

    station: str
    key: str
    kind: str
    source: str
    active: bool
    acknowledged: bool = False
    message: str
    time_utc: datetime


def _json_object(payload: Payload, what: str) -> dict[str, Any]:
    def no_constants(name: str) -> None:
        raise PayloadRefused(f"{what}: {name} is not a JSON number")

    if isinstance(payload, Mapping):
        try:  # the same rules as for received text: JSON numbers only
            payload = json.dumps(payload, allow_nan=False)
        except (TypeError, ValueError) as err:
            raise PayloadRefused(f"{what}: not JSON-encodable: {err}") from None
    try:
        obj = json.loads(payload, parse_constant=no_constants)
    except (UnicodeDecodeError, json.JSONDecodeError) as err:
        raise PayloadRefused(f"{what}: not valid JSON ({err})") from None
    if not isinstance(obj, dict):
        raise PayloadRefused(f"{what}: expected a JSON object, got {type(obj).__name__}")
    return obj


def _parse(model: type[_M], payload: Payload, what: str) -> tuple[_M, dict[str, Any]]:
    obj = _json_object(payload, what)
    try:
        record = model.model_validate(obj)
    except ValidationError as err:
        problems = "; ".join(f"{what}.{line}" for line in problem_lines(err))
        raise PayloadRefused(problems) from None
    return record, obj


def _check_origin(what: str, station: str, time_utc: datetime) -> None:
    """Every record names its station (an MQTT topic level) and a time with a UTC offset."""
    if not station or station != station.strip() or any(c in station for c in "/+#"):
        raise PayloadRefused(
            f"{what}.station: expected a station name without '/', '+', '#' or spaces"
        )
    if time_utc.tzinfo is None or time_utc.utcoffset() is None:
        raise PayloadRefused(f"{what}.time_utc: needs a UTC offset (e.g. 2026-11-30T08:15:02Z)")


def parse_measurement(payload: Payload) -> tuple[Measurement, dict[str, Any]]:
    record, obj = _parse(Measurement, payload, "measurement")
    _check_origin("measurement", record.station, record.time_utc)
    if record.seq < 1:
        raise PayloadRefused("measurement.seq: expected 1 or more (seq is 1-based)")
    return record, obj


def parse_alarm(payload: Payload) -> tuple[AlarmChange, dict[str, Any]]:
    record, obj = _parse(AlarmChange, payload, "alarm")
    _check_origin("alarm", record.station, record.time_utc)
    if record.key != f"{record.kind}:{record.source}":
        raise PayloadRefused(
            f"alarm.key: expected '<kind>:<source>' ({record.kind}:{record.source}), "
            f"got {record.key!r}"
        )
    return record, obj


def parse_calibration(payload: Payload) -> tuple[CalibrationRecord, dict[str, Any]]:
    record, obj = _parse(CalibrationRecord, payload, "calibration")
    _check_origin("calibration", record.station, record.time_utc)
    if not record.id.strip():
        raise PayloadRefused("calibration.id: expected a non-empty id")
    return record, obj


def parse_status(station: str, status: bytes | str, time_utc: datetime) -> Availability:
    """A station's availability message (``online``/``offline``) and when it was received."""
    _check_origin("status", station, time_utc)
    text = status.decode("utf-8", errors="replace") if isinstance(status, bytes) else status
    if text == "online":
        return "online"
    if text == "offline":
        return "offline"
    raise PayloadRefused(f"status: expected 'online' or 'offline', got {text[:40]!r}")
