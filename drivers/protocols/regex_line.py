"""Generic line scale configured with a regular expression (docs/protocols.md c, ``regex_line``).

The ``pattern`` must match the whole line (surrounding whitespace stripped) and has a named group
``value`` and optionally ``unit`` and ``stable``. Example for a scale printing ``N  +0123.4 g``::

    pattern = '(?P<stable>[SN])\\s+(?P<value>[+-]?\\s*[0-9.]+)\\s*(?P<unit>[a-z]+)'
    stable_match = 'S'
"""

from __future__ import annotations

import re
from collections.abc import Mapping
from typing import Any, ClassVar, Literal

from pydantic import Field, field_validator, model_validator

from heft.drivers import units
from heft.drivers.base import FrameError, LineDriver, LineOptions, parse_decimal
from heft.drivers.reading import DriverOutput, Flag

_ESCAPES = {"\\r": "\r", "\\n": "\n", "\\t": "\t"}


def compile_option(pattern: str, what: str) -> re.Pattern[str]:
    """Compile a regular expression given as an option; ValueError (for pydantic) if bad."""
    try:
        return re.compile(pattern)
    except re.error as err:
        raise ValueError(f"{what} is not a valid regular expression: {err}") from None


class RegexLineOptions(LineOptions):
    pattern: str
    """Regular expression matching a whole line; named groups value, unit, stable."""
    stable_match: str | None = None
    """Regular expression the ``stable`` group must match for STABLE (default: non-empty)."""
    default_unit: str = "g"
    poll: str | None = None
    """Sent (followed by ``terminator``) every ``poll_interval_s``; None: the scale streams."""
    poll_interval_s: float = Field(default=0.5, gt=0, le=60)
    terminator: str = "\r\n"
    commands: dict[Literal["zero", "tare", "identify", "reboot"], str] = Field(
        default_factory=dict)
    """Host command strings, e.g. ``{zero = "Z", tare = "T"}`` (``terminator`` is appended)."""

    @field_validator("pattern")
    @classmethod
    def _pattern_has_value_group(cls, pattern: str) -> str:
        if "value" not in compile_option(pattern, "pattern").groupindex:
            raise ValueError("pattern needs a named group (?P<value>...)")
        return pattern

    @field_validator("stable_match")
    @classmethod
    def _stable_match_compiles(cls, pattern: str | None) -> str | None:
        if pattern is not None:
            compile_option(pattern, "stable_match")
        return pattern

    @field_validator("default_unit")
    @classmethod
    def _known_unit(cls, unit: str) -> str:
        units.mass_to_g(1.0, unit)  # UnitError is a ValueError: pydantic reports it
        return unit

    @model_validator(mode="after")
    def _terminator_unescaped(self) -> RegexLineOptions:
        # TOML users may write the two characters backslash-r; accept both spellings.
        term = self.terminator
        for escaped, char in _ESCAPES.items():
            term = term.replace(escaped, char)
        object.__setattr__(self, "terminator", term)
        return self


class RegexLineDriver(LineDriver):
    """Readings from any line-oriented scale described by a regular expression."""

    name: ClassVar[str] = "regex_line"
    Options: ClassVar[type[LineOptions]] = RegexLineOptions
    options: RegexLineOptions

    def __init__(self, device: str, options: Mapping[str, Any] | None = None) -> None:
        super().__init__(device, options)
        self._pattern = re.compile(self.options.pattern)
        stable = self.options.stable_match
        self._stable = re.compile(stable) if stable is not None else None
        self._has_unit = "unit" in self._pattern.groupindex
        self._has_stable = "stable" in self._pattern.groupindex
        self.poll_interval_s = self.options.poll_interval_s if self.options.poll else None

    def _line(self, text: str) -> bytes:
        return (text + self.options.terminator).encode("ascii")

    def poll_request(self) -> bytes | None:
        return self._line(self.options.poll) if self.options.poll else None

    def _encode_command(self, name: str, arg: str | None) -> bytes | None:
        text = self.options.commands.get(name)  # type: ignore[call-overload]
        return None if text is None else self._line(text)

    def parse_line(self, line: bytes, t_mono_s: float) -> list[DriverOutput]:
        m = self._pattern.fullmatch(self._text(line).strip())
        if m is None:
            raise FrameError("line does not match the configured pattern")
        value = parse_decimal((m["value"] or "").replace(" ", ""), "value")
        unit = (m["unit"] or "").strip() if self._has_unit else ""
        unit = units.canonical_unit(unit) if unit else self.options.default_unit
        flags = Flag.NONE
        if self._has_stable:
            text = m["stable"] or ""
            stable = self._stable.fullmatch(text) is not None if self._stable else bool(text)
            flags = Flag.STABLE if stable else Flag.MOTION
        return [self._mass_reading(value=value, unit=unit, flags=flags, t_mono_s=t_mono_s,
                                   raw=line)]
