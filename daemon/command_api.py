"""Commands the service accepts (from MQTT, the dashboard or tests) and the replies it gives.

Validated with pydantic so a bad command gets a reply naming the field, never an exception.
"""

from __future__ import annotations

from typing import Annotated, Any, Literal

from pydantic import BaseModel, ConfigDict, Field, TypeAdapter, ValidationError
from pydantic.json_schema import SkipJsonSchema

from heft.drivers.validation import problem_lines

# Bounds on what a command may carry: a reference mass heavier than 100 kg or a balance point
# beyond 100 in is a typing error on any golf bench, and inf/NaN never name a real value.
MAX_MASS_G = 100_000.0
MAX_BALANCE_POINT = 100.0
Text = Annotated[str, Field(max_length=200)]


class _Cmd(BaseModel):
    model_config = ConfigDict(frozen=True, extra="forbid", allow_inf_nan=False)
    request_id: Text | None = Field(default=None, description="echoed in the reply (MQTT 3.1.1)")
    # Set by the station from a verified signature (heft.daemon.command_auth), never sent: the
    # MQTT responder refuses a payload that carries it, and it is left out of every dump.
    operator: SkipJsonSchema[str | None] = Field(default=None, exclude=True)


class Ping(_Cmd):
    """Read-only: the station answers with its name (a probe that a link is alive)."""

    command: Literal["ping"]


class Tare(_Cmd):
    command: Literal["tare"]
    device: Text | None = None


class Zero(_Cmd):
    command: Literal["zero"]
    device: Text | None = None


class Rearm(_Cmd):
    command: Literal["rearm"]


class SelectJob(_Cmd):
    command: Literal["select_job"]
    job: Text


class SelectSpec(_Cmd):
    command: Literal["select_spec"]
    spec: Text
    club: Text | None = None


class SetClubId(_Cmd):
    command: Literal["set_club_id"]
    club_id: Text


class SetBalancePoint(_Cmd):
    """Balance point of the club on a single-scale station, e.g. 29.25 or "743mm"."""

    command: Literal["set_balance_point"]
    balance_point: (
        Annotated[float, Field(gt=0, le=MAX_BALANCE_POINT, allow_inf_nan=False)] | Text
    )


class CalibrateZero(_Cmd):
    command: Literal["calibrate_zero"]
    channel: Text


class CalibrateSpan(_Cmd):
    command: Literal["calibrate_span"]
    channel: Text
    mass_g: float = Field(gt=0, le=MAX_MASS_G, allow_inf_nan=False)
    weight_class: Text = "M1"
    weight_id: Text = ""


class VerifyCheckMass(_Cmd):
    command: Literal["verify"]
    channel: Text
    mass_g: float = Field(gt=0, le=MAX_MASS_G, allow_inf_nan=False)
    weight_class: Text = "M1"
    weight_id: Text = ""
    tolerance_g: float | None = Field(
        default=None, gt=0, le=MAX_MASS_G, allow_inf_nan=False
    )


class AcknowledgeAlarm(_Cmd):
    command: Literal["ack_alarm"]
    key: Text = Field(description="'<kind>:<source>' as in the alarm payload")


Command = Annotated[
    Ping
    | Tare
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
    operator: str | None = Field(default=None, description="who signed the command")
    message: str = ""
    data: dict[str, Any] = Field(default_factory=dict)


READ_ONLY_COMMANDS = frozenset({"ping"})  # open to anyone; every other command changes state


def parse_command(payload: bytes | str | dict[str, Any]) -> Command | Reply:
    """Parse a command (JSON text or an already decoded object); never raises.

    On failure returns an error Reply naming the field and expectation.
    """
    try:
        if isinstance(payload, dict):
            return _COMMAND_ADAPTER.validate_python(payload)
        return _COMMAND_ADAPTER.validate_json(payload)
    except ValidationError as err:
        first = problem_lines(err, Command, top="payload", show_tags=True, first_only=True)[0]
        return Reply(ok=False, message=f"bad command: {first}")
    except Exception as err:  # RecursionError and the like: bad input, never a crash
        name = type(err).__name__
        return Reply(ok=False, message=f"bad command: payload: cannot be decoded ({name})")
