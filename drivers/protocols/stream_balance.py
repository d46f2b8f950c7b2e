"""Continuous-output balance (docs/protocols.md section b, driver ``stream_balance``).

Lines like ``ST,GS,+00123.45   g``: stability header (ST/US/OL), gross/net/tare header
(GS/NT/TR), a signed value and a unit. The unit may change mid-stream; every reading is converted
to grams and keeps the unit sent. ``TR`` lines report a tare value: a CommandReply, never a
reading. ``OL`` lines become OVERLOAD readings (UNDERLOAD when the sign is ``-``) with value NaN,
because the value field of an overload line is a placeholder.
"""

from __future__ import annotations

import math
import re
from collections.abc import Mapping
from typing import Any, ClassVar, Final

from pydantic import Field

from heft.drivers.base import CommandReply, FrameError, LineDriver, LineOptions, parse_decimal
from heft.drivers.reading import DriverOutput, Flag

UNITS: Final = frozenset({"g", "kg", "oz", "lb", "ct", "ozt"})
_STABILITY: Final = {"ST": Flag.STABLE, "US": Flag.MOTION}
_GROSS_NET: Final = {"GS": Flag.NONE, "NT": Flag.NET}
# Sign, value (digits, one point, leading pad spaces tolerated), spaces, unit.
_VALUE_UNIT: Final = re.compile(r"(?P<sign>[+-])(?P<value>[ 0-9.]{1,10}?)\s*(?P<unit>[a-z]{1,3})")
# Overload: sign, then the placeholder digits or blanks, then optionally a unit.
_OVERLOAD: Final = re.compile(r"(?P<sign>[+-]?)[ 0-9.]*\s*(?P<unit>[a-z]{0,3})")
CRLF: Final = b"\r\n"


class StreamBalanceOptions(LineOptions):
    request_interval_s: float | None = Field(default=None, gt=0, le=60)
    """If set, send ``R`` (request one line) this often, for balances set to print on request."""


class StreamBalanceDriver(LineDriver):
    """Readings from a balance that streams ``H1,H2,value unit`` lines."""

    name: ClassVar[str] = "stream_balance"
    Options: ClassVar[type[LineOptions]] = StreamBalanceOptions
    options: StreamBalanceOptions

    def __init__(self, device: str, options: Mapping[str, Any] | None = None) -> None:
        super().__init__(device, options)
        self.poll_interval_s = self.options.request_interval_s

    def poll_request(self) -> bytes | None:
        return b"R" + CRLF if self.options.request_interval_s else None

    def _encode_command(self, name: str, arg: str | None) -> bytes | None:
        code = {"zero": b"Z", "tare": b"T"}.get(name)
        return None if code is None else code + CRLF

    def parse_line(self, line: bytes, t_mono_s: float) -> list[DriverOutput]:
        parts = self._text(line).strip().split(",")
        if len(parts) != 3:
            raise FrameError("expected 'H1,H2,<value><unit>'")
        h1, h2, rest = parts
        if h2 not in _GROSS_NET and h2 != "TR":
            raise FrameError(f"header {h2!r} is not GS, NT or TR")
        if h1 == "OL":
            m = _OVERLOAD.fullmatch(rest)
            if m is None:
                raise FrameError("malformed overload line")
            unit = self._accept_unit(m["unit"], UNITS) if m["unit"] else self._last_unit
            flags = (Flag.UNDERLOAD if m["sign"] == "-" else Flag.OVERLOAD) | _GROSS_NET.get(
                h2, Flag.NONE)
            return [self._mass_reading(value=math.nan, unit=unit, flags=flags,
                                       t_mono_s=t_mono_s, raw=line)]
        if h1 not in _STABILITY:
            raise FrameError(f"header {h1!r} is not ST, US or OL")
        m = _VALUE_UNIT.fullmatch(rest)
        if m is None:
            raise FrameError("expected a signed value then a unit")
        magnitude = parse_decimal(m["value"].strip(), "weight")
        value = -magnitude if m["sign"] == "-" else magnitude
        unit = self._accept_unit(m["unit"], UNITS)
        if h2 == "TR":
            tare = self._mass_reading(value=value, unit=unit, flags=Flag.NONE,
                                      t_mono_s=t_mono_s, raw=line)
            self._reply(CommandReply(self.device, "tare", True, "tare value", t_mono_s, line,
                                     value_g=tare.value))
            return []
        flags = _STABILITY[h1] | _GROSS_NET[h2]
        return [self._mass_reading(value=value, unit=unit, flags=flags, t_mono_s=t_mono_s,
                                   raw=line)]
