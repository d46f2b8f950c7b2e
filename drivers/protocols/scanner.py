"""Barcode / QR scanner in serial line mode (docs/protocols.md section f, driver ``scanner``).

Each scan is one line; configured ``prefix``/``suffix`` are stripped (and required when set),
and the id must match ``pattern`` when one is configured. Produces ``ClubTag``.
"""

from __future__ import annotations

import re
from collections.abc import Mapping
from typing import Any, ClassVar

from pydantic import field_validator

from heft.drivers.base import FrameError, LineDriver, LineOptions
from heft.drivers.protocols.regex_line import compile_option
from heft.drivers.reading import ClubTag, DriverOutput


class ScannerOptions(LineOptions):
    prefix: str = ""
    suffix: str = ""
    pattern: str | None = None
    """Regular expression a club id must match in full, e.g. ``'LC-[0-9]{5}'``."""

    @field_validator("pattern")
    @classmethod
    def _compiles(cls, pattern: str | None) -> str | None:
        if pattern is not None:
            compile_option(pattern, "pattern")
        return pattern


class ScannerDriver(LineDriver):
    """Club ids from a scanner that types one line per scan."""

    name: ClassVar[str] = "scanner"
    Options: ClassVar[type[LineOptions]] = ScannerOptions
    options: ScannerOptions

    def __init__(self, device: str, options: Mapping[str, Any] | None = None) -> None:
        super().__init__(device, options)
        pattern = self.options.pattern
        self._pattern = re.compile(pattern) if pattern is not None else None

    def parse_line(self, line: bytes, t_mono_s: float) -> list[DriverOutput]:
        try:
            text = line.decode("utf-8").strip()
        except UnicodeDecodeError:
            raise FrameError("scan is not UTF-8 text") from None
        if not text.isprintable():
            raise FrameError("control characters in scan")
        prefix, suffix = self.options.prefix, self.options.suffix
        if not (text.startswith(prefix) and text.endswith(suffix)) or (
            len(text) < len(prefix) + len(suffix)
        ):
            raise FrameError(f"scan lacks the configured prefix {prefix!r} / suffix {suffix!r}")
        club_id = text[len(prefix) : len(text) - len(suffix)].strip()
        if not club_id:
            raise FrameError("empty scan")
        if self._pattern is not None and not self._pattern.fullmatch(club_id):
            raise FrameError(f"club id {club_id!r} does not match {self._pattern.pattern!r}")
        return [ClubTag(device=self.device, t_mono_s=t_mono_s, club_id=club_id, raw=line)]
