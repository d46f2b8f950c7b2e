"""Commands the service accepts (from MQTT, the dashboard or tests) and the replies it gives.

Validated with pydantic so a bad command gets a reply naming the field, never an exception.
"""

from __future__ import annotations

from typing import Annotated, Any, Literal

from pydantic import BaseModel, ConfigDict, Field, TypeAdapter, ValidationError

from heft.drivers.validation import problem_lines


class _Cmd(BaseModel):
    model_config = ConfigDict(frozen=True, extra="forbid")
    request_id: str | None = Field(default=None, description="echoed in the reply (MQTT 3.1.1)")


class Tare(_Cmd):
    command: Literal["tare"]
    device: str | None = None


class Zero(_Cmd):
    command: Literal["zero"]
    device: str | None = None


class Rearm(_Cmd):
    command: Literal["rearm"]


class SelectJob(_Cmd):
    command: Literal["select_job"]
    job: str


class SelectSpec(_Cmd):
    command: Literal["select_spec"]
    spec: str
    club: str | None = None


class SetClubId(_Cmd):
    command: Literal["set_club_id"]
    club_id: str


class SetBalancePoint(_Cmd):
    """Balance point of the club on a single-scale station, e.g. 29.25 or "743mm"."""

    command: Literal["set_balance_point"]
    balance_point: float | str


class CalibrateZero(_Cmd):
    command: Literal["calibrate_zero"]
    channel: str


class CalibrateSpan(_Cmd):
    command: Literal["calibrate_span"]
    channel: str
    mass_g: float = Field(gt=0)
    weight_class: str = "M1"
    weight_id: str = ""


class VerifyCheckMass(_Cmd):
    command: Literal["verify"]
    channel: str
    mass_g: float = Field(gt=0)
    weight_class: str = "M1"
    weight_id: str = ""
    tolerance_g: float | None = Field(default=None, gt=0)


class AcknowledgeAlarm(_Cmd):
    command: Literal["ack_alarm"]
    key: str = Field(description="'<kind>:<source>' as in the alarm payload")


Command = Annotated[
    Tare
    | Zero
    | Rearm
    | SelectJob
    | SelectSpec
    | SetClubId
    | SetBalancePoint
    | CalibrateZero
    | CalibrateSpan
    | VerifyCheckMass
    | AcknowledgeAlarm,
    Field(discriminator="command"),
]

_COMMAND_ADAPTER: TypeAdapter[Command] = TypeAdapter(Command)


class Reply(BaseModel):
    model_config = ConfigDict(frozen=True)

    ok: bool
    command: str | None = None
    request_id: str | None = None
    message: str = ""
    data: dict[str, Any] = Field(default_factory=dict)


def parse_command(payload: bytes | str) -> Command | Reply:
    """Parse a JSON command; on failure return an error Reply naming the field and expectation."""
    try:
        return _COMMAND_ADAPTER.validate_json(payload)
    except ValidationError as err:
        first = problem_lines(err, Command, top="payload", show_tags=True, first_only=True)[0]
        return Reply(ok=False, message=f"bad command: {first}")
