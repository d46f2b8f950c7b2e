"""Lab balance with a poll command set (docs/protocols.md section a, driver ``poll_balance``).

Replies are space-separated fields: ``S S     123.45 g`` (stable), ``S D ...`` (dynamic),
``S +``/``S -`` (over/underload), ``Z A``/``T S <value> <unit>`` (zero/tare done), ``I4 A "sn"``
(identity). In ``poll`` mode the session sends ``SI`` (or ``S``) every ``poll_interval_s``; in
``continuous`` mode ``SIR`` is sent once on open and re-sent after every other command, because
any command ends the balance's continuous send.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from typing import Any, ClassVar, Final, Literal

from pydantic import Field

from heft.drivers.base import CommandReply, FrameError, LineDriver, LineOptions, parse_decimal
from heft.drivers.reading import DeviceInfo, DriverOutput, Flag

UNITS: Final = frozenset({"g", "kg", "mg", "oz", "lb", "ct"})
_WEIGHT_FLAGS: Final = {"S": Flag.STABLE, "D": Flag.MOTION}
_LIMIT_FLAGS: Final = {"+": Flag.OVERLOAD, "-": Flag.UNDERLOAD}
_REFUSALS: Final = {
    "I": "refused: not stable or busy",
    "+": "refused: above the zero/tare range",
    "-": "refused: below the zero/tare range",
}
_DEVICE_ERRORS: Final = {
    "ES": "balance reports a syntax error (ES)",
    "ET": "balance reports a transmission error (ET)",
    "EL": "balance reports a logical error (EL)",
}
CRLF: Final = b"\r\n"


class PollBalanceOptions(LineOptions):
    mode: Literal["poll", "continuous"] = "poll"
    """``poll``: ask every poll_interval_s; ``continuous``: send SIR once, the balance streams."""
    poll_command: Literal["SI", "S"] = "SI"
    """``SI`` answers at once (stable or not); ``S`` waits for stability on the balance."""
    poll_interval_s: float = Field(default=0.25, gt=0, le=60)


class PollBalanceDriver(LineDriver):
    """Readings from ``S S``/``S D`` lines; zero, tare and identity replies as CommandReply."""

    name: ClassVar[str] = "poll_balance"
    Options: ClassVar[type[LineOptions]] = PollBalanceOptions
    options: PollBalanceOptions

    def __init__(self, device: str, options: Mapping[str, Any] | None = None) -> None:
        super().__init__(device, options)
        self.poll_interval_s = (
            self.options.poll_interval_s if self.options.mode == "poll" else None)

    def poll_request(self) -> bytes | None:
        return self.options.poll_command.encode() + CRLF if self.options.mode == "poll" else None

    def on_open(self) -> bytes | None:
        return b"SIR" + CRLF if self.options.mode == "continuous" else None

    def _encode_command(self, name: str, arg: str | None) -> bytes | None:
        code = {"zero": b"Z", "tare": b"T", "identify": b"@"}.get(name)
        if code is None:
            return None
        resume = b"SIR" + CRLF if self.options.mode == "continuous" else b""
        return code + CRLF + resume

    def parse_line(self, line: bytes, t_mono_s: float) -> list[DriverOutput]:
        fields = self._text(line).split()
        head = fields[0]
        if head in _DEVICE_ERRORS and len(fields) == 1:
            raise FrameError(_DEVICE_ERRORS[head])
        if len(fields) < 2:
            raise FrameError("reply has no status field")
        status = fields[1]
        if head == "S":
            return self._weight(fields, status, line, t_mono_s)
        if head in ("Z", "T"):
            return self._zero_or_tare(fields, head, status, line, t_mono_s)
        if head == "I4" and status == "A" and len(fields) >= 3:
            serial = " ".join(fields[2:]).strip('"')
            self._reply(CommandReply(self.device, "identify", True, serial, t_mono_s, line))
            return [DeviceInfo(device=self.device, serial_number=serial)]
        raise FrameError(f"unknown reply {head!r}")

    def _weight(
        self, fields: list[str], status: str, line: bytes, t_mono_s: float
    ) -> list[DriverOutput]:
        if status in _LIMIT_FLAGS and len(fields) == 2:
            flags = _LIMIT_FLAGS[status]
            return [self._mass_reading(value=math.nan, unit=self._last_unit, flags=flags,
                                       t_mono_s=t_mono_s, raw=line)]
        if status == "I" and len(fields) == 2:
            raise FrameError("balance busy (S I)")
        if status not in _WEIGHT_FLAGS or len(fields) != 4:
            raise FrameError("expected 'S S|D <value> <unit>'")
        value = parse_decimal(fields[2], "weight")
        unit = self._accept_unit(fields[3], UNITS)
        return [self._mass_reading(value=value, unit=unit, flags=_WEIGHT_FLAGS[status],
                                   t_mono_s=t_mono_s, raw=line)]

    def _zero_or_tare(
        self, fields: list[str], head: str, status: str, line: bytes, t_mono_s: float
    ) -> list[DriverOutput]:
        command = "zero" if head == "Z" else "tare"
        if len(fields) == 2 and status in _REFUSALS:
            self._reply(
                CommandReply(self.device, command, False, _REFUSALS[status], t_mono_s, line))
        elif head == "Z" and fields[1:] == ["A"]:
            self._reply(CommandReply(self.device, "zero", True, "zeroed", t_mono_s, line))
        elif head == "T" and status == "S" and len(fields) == 4:
            value = parse_decimal(fields[2], "tare weight")
            reading = self._mass_reading(value=value, unit=self._accept_unit(fields[3], UNITS),
                                         flags=Flag.NONE, t_mono_s=t_mono_s, raw=line)
            self._reply(CommandReply(self.device, "tare", True, "tare taken", t_mono_s, line,
                                     value_g=reading.value))
        else:
            raise FrameError(f"malformed {command} reply")
        return []
