"""Simulated devices defined as data: ``drivers/sim/definition_files/*.json`` (package data).

Each file describes one device: its protocol, sample rate, display step, capacity, sensor noise
and drift, and protocol details (ADC counts per gram and offset for beam channels, the line
template of a generic line scale, ...). A file carries ``"spec": 1``; another number is refused
with a message naming the file and the version this heft reads. A new simulated device needs a
new file, not new code.
"""

from __future__ import annotations

import json
from importlib import resources
from importlib.resources.abc import Traversable
from pathlib import Path
from typing import Annotated, Any, Final, Literal, TypeVar

from pydantic import BaseModel, ConfigDict, Field, TypeAdapter, ValidationError

from heft.drivers.validation import problem_lines

SPEC_VERSION: Final = 1
# Found through the package (importlib.resources), so an installed wheel has them too.
DEFINITIONS_DIR: Final[Traversable] = resources.files(__package__) / "definition_files"

Protocol = Literal["poll_balance", "stream_balance", "regex_line", "beam", "scanner"]
PROTOCOLS: Final[tuple[str, ...]] = (
    "poll_balance",
    "stream_balance",
    "regex_line",
    "beam",
    "scanner",
)


class DefinitionError(ValueError):
    """A device definition that cannot be used; the message names the file and the field."""


class _Base(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)

    spec: Literal[1]
    name: str = Field(min_length=1, description="device name used in recordings and logs")
    description: str = ""
    model: str = "heft-sim"
    firmware: str = "sim-1.0"
    serial_number: str = "SIM0001"
    rate_hz: float = Field(gt=0, le=10000, description="samples (or lines) per second")


class _ScaleBase(_Base):
    """What every gram scale shares: one bench channel, a display, a capacity."""

    bench_channel: int = Field(0, ge=0, description="which support of the bench it sits under")
    unit: str = "g"
    display_step: float = Field(0.01, gt=0, description="display step d, in `unit`")
    capacity_g: float = Field(gt=0)
    noise_g: float = Field(0.0, ge=0, description="standard deviation per sample")
    drift_g_per_s: float = 0.0
    stable_window_s: float = Field(0.3, gt=0, description="own stability: within 1 d this long")


class PollBalanceDef(_ScaleBase):
    protocol: Literal["poll_balance"]
    stable_timeout_s: float = Field(2.0, gt=0, description="`S` answers `S I` after this")


class StreamBalanceDef(_ScaleBase):
    protocol: Literal["stream_balance"]
    streaming: bool = True  # False: lines only on `R`


class RegexLineDef(_ScaleBase):
    protocol: Literal["regex_line"]
    line_format: str = "WT {stable} {value:>9} {unit}"
    stable_text: str = "ST"
    motion_text: str = "MO"
    overload_line: str = "WT OL"
    poll: str | None = None  # when set, a line is sent only in answer to this string
    terminator: str = "\r\n"
    driver_options: dict[str, Any] = Field(
        default_factory=dict, description="options a regex_line driver needs to read this device"
    )


class BeamChannelDef(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)

    bench_channel: int = Field(ge=0)
    counts_per_g: float = Field(description="ADC counts per gram (sign follows the wiring)")
    offset_counts: int = Field(description="counts with nothing on the cell")


class BeamDef(_Base):
    protocol: Literal["beam"]
    rate_hz: float = Field(80, gt=0, le=10000)
    allowed_rates_hz: tuple[int, ...] = (10, 80)
    adc_bits: int = Field(24, ge=8, le=32)
    channels: tuple[BeamChannelDef, ...] = Field(min_length=1)
    capacity_g: float = Field(
        5000.0, gt=0, description="rated capacity of each cell (informational: the ADC range "
        "decides where counts saturate)"
    )
    noise_g: float = Field(0.0, ge=0)
    drift_g_per_s: float = 0.0
    boot_banner: tuple[str, ...] = ()
    boot_time_s: float = Field(0.3, ge=0)
    clock_ppm: float = 0.0
    clock_start_ms: int = Field(0, ge=0)


class ScannerDef(_Base):
    protocol: Literal["scanner"]
    rate_hz: float = Field(20, gt=0, le=1000, description="how often it checks for a scan")
    prefix: str = ""
    suffix: str = ""
    terminator: str = "\r\n"
    scan_lead_s: float = Field(1.0, ge=0, description="scan this long before a placement")


DeviceDefinition = Annotated[
    PollBalanceDef | StreamBalanceDef | RegexLineDef | BeamDef | ScannerDef,
    Field(discriminator="protocol"),
]
_ADAPTER: Final[TypeAdapter[DeviceDefinition]] = TypeAdapter(DeviceDefinition)

AnyDefinition = PollBalanceDef | StreamBalanceDef | RegexLineDef | BeamDef | ScannerDef
_D = TypeVar("_D", PollBalanceDef, StreamBalanceDef, RegexLineDef, BeamDef, ScannerDef)


def parse_definition(data: Any, *, source: str = "<definition>") -> AnyDefinition:
    """Validate a decoded JSON object; raises DefinitionError naming ``source`` and the field."""
    if not isinstance(data, dict):
        raise DefinitionError(f"{source}: expected a JSON object, got {type(data).__name__}")
    if "spec" not in data:
        raise DefinitionError(f'{source}: missing "spec"; expected "spec": {SPEC_VERSION}')
    if data["spec"] != SPEC_VERSION:
        raise DefinitionError(
            f"{source}: device definition spec {data['spec']!r} is not supported; "
            f"this heft reads spec {SPEC_VERSION}"
        )
    if data.get("protocol") not in PROTOCOLS:
        raise DefinitionError(
            f"{source}: protocol {data.get('protocol')!r} unknown; expected one of "
            f"{', '.join(PROTOCOLS)}"
        )
    try:
        return _ADAPTER.validate_python(data)
    except ValidationError as err:
        first = problem_lines(err, DeviceDefinition, top="(top)", first_only=True)[0]
        raise DefinitionError(f"{source}: field {first}") from err


def load_definition(path: str | Path | Traversable) -> AnyDefinition:
    """Read and validate one definition file."""
    p = Path(path) if isinstance(path, str) else path
    try:
        data = json.loads(p.read_text(encoding="utf-8"))
    except OSError as err:
        raise DefinitionError(f"{p}: cannot read: {err.strerror}") from err
    except json.JSONDecodeError as err:
        raise DefinitionError(f"{p}: not JSON: {err.msg} at line {err.lineno}") from err
    return parse_definition(data, source=str(p))


def builtin_definition(name: str) -> AnyDefinition:
    """The shipped definition ``definition_files/<name>.json`` (one per protocol)."""
    path = DEFINITIONS_DIR / f"{name}.json"
    if not path.is_file():
        known = sorted(
            p.name.removesuffix(".json")
            for p in DEFINITIONS_DIR.iterdir()
            if p.name.endswith(".json")
        )
        raise DefinitionError(f"no device definition {name!r}; shipped: {', '.join(known)}")
    return load_definition(path)


def builtin_of(name: str, kind: type[_D]) -> _D:
    """``builtin_definition`` checked to be of ``kind`` (e.g. ``BeamDef``)."""
    definition = builtin_definition(name)
    if not isinstance(definition, kind):
        raise DefinitionError(
            f"definition {name!r} is a {definition.protocol} device, expected {kind.__name__}"
        )
    return definition
