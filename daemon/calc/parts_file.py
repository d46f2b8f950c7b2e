"""The ``--parts`` TOML file of ``heft calc`` (docs/calc.md), read by a pydantic model.

Values are numbers (grams, inches) or strings with a unit (``"262g"``, ``"37in"``). Unknown keys,
a value that is not a mass or a length, ``nan``/``inf`` (TOML has them) are refused with one line
naming the key as the file writes it (``shaft.mass``, ``[[extra]] #1 at``). Pure: the caller
reads the file.
"""

from __future__ import annotations

import math
import tomllib
from typing import Annotated, Any

from pydantic import BaseModel, BeforeValidator, ConfigDict, ValidationError

from heft.daemon.calc.requests import CalcError, ExtraMass
from heft.daemon.physics.build_defaults import End
from heft.drivers.units import parse_quantity
from heft.drivers.validation import problem_lines


def _quantity(kind: str) -> BeforeValidator:
    def parse(raw: Any) -> float:
        if isinstance(raw, str):
            return parse_quantity(raw, kind=kind)  # UnitError is a ValueError: names the form
        if isinstance(raw, bool) or not isinstance(raw, int | float):
            raise ValueError("must be a number or a string like '262g'")
        if not math.isfinite(raw):
            raise ValueError("must be a finite number")
        return float(raw)

    return BeforeValidator(parse)


def _text(raw: Any) -> Any:
    """A name: a number or a date in the file is taken as written (``name = 7``)."""
    if raw is None or isinstance(raw, str | dict | list):
        return raw
    return str(raw)


def _end(raw: Any) -> Any:
    """``rides_with``: tip or butt, any case; blank means "the nearer end"."""
    if isinstance(raw, str):
        return raw.strip().lower() or None
    return raw


Mass = Annotated[float, _quantity("mass")]
Length = Annotated[float, _quantity("length")]


class _Table(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)


class Head(_Table):
    mass: Mass | None = None
    cg_from_end: Length | None = None


class ShaftTable(_Table):
    mass: Mass | None = None
    length: Length | None = None
    balance_point: Length | None = None
    tip_trim: Length | None = None
    butt_trim: Length | None = None
    butt_at: Length | None = None


class Grip(_Table):
    mass: Mass | None = None
    cg: Length | None = None


class Extra(_Table):
    name: Annotated[str | None, BeforeValidator(_text)] = None
    mass: Mass
    at: Length
    rides_with: Annotated[End | None, BeforeValidator(_end)] = None


class PartsFile(_Table):
    length: Length | None = None
    head: Head = Head()
    shaft: ShaftTable = ShaftTable()
    grip: Grip = Grip()
    extra: list[Extra] = []

    def values(self) -> dict[str, float]:
        """The values given, keyed by the :class:`PartsPrediction` field they fill."""
        found = {
            "length_in": self.length,
            "head_g": self.head.mass,
            "head_cg_from_end_in": self.head.cg_from_end,
            "shaft_g": self.shaft.mass,
            "shaft_length_in": self.shaft.length,
            "shaft_balance_point_in": self.shaft.balance_point,
            "tip_trim_in": self.shaft.tip_trim,
            "butt_trim_in": self.shaft.butt_trim,
            "shaft_butt_at_in": self.shaft.butt_at,
            "grip_g": self.grip.mass,
            "grip_cg_in": self.grip.cg,
        }
        return {k: v for k, v in found.items() if v is not None}

    def extras(self) -> list[ExtraMass]:
        return [
            ExtraMass(e.name or f"extra {i}", e.mass, e.at, e.rides_with)
            for i, e in enumerate(self.extra, start=1)
        ]


def parse_parts_file(text: str) -> PartsFile:
    """The parts file's text as a model; CalcError (field ``parts_file``) naming the key."""
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as err:
        raise CalcError(("parts_file",), f"not valid TOML: {err}") from None
    try:
        return PartsFile.model_validate(data)
    except ValidationError as err:
        line = problem_lines(err, PartsFile, noun="key", toml_paths=True, first_only=True)[0]
        raise CalcError(("parts_file",), line) from None
