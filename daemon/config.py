"""The station config: one TOML file, validated with pydantic before anything starts.

Layout (every table is described in docs/service.md and shown by ``heft config example``)::

    station = "bench-1"          # station id, used in topics and records
    job = "..."                  # active job at start (optional)
    [storage]   path
    [[devices]] name, driver, port | url, baudrate, options
    [geometry]  type = two_support | lever_beam | single_scale, plus that type's fields
    [channels."<device>/<index>"]  calibration of a load-cell channel, display step
    [capture]   CaptureParams
    [specs.<name>] target swing weight, tolerances, ranges, per-club targets
    [jobs.<name>]  spec
    [mqtt]      MqttSettings

Lengths and masses accept unit suffixes (``"36in"``, ``"914mm"``, ``"390g"``, ``"13.7oz"``);
bare numbers are inches and grams. A bad file gives one :class:`ConfigError` whose message names
the field path (``geometry.position_b_in``) and the expected form, one line per problem.
"""

from __future__ import annotations

import difflib
import sys
import tomllib
import types
from pathlib import Path
from typing import Annotated, Any, Literal, Union, get_args, get_origin

from pydantic import (
    BaseModel,
    BeforeValidator,
    ConfigDict,
    Field,
    PlainSerializer,
    PlainValidator,
    ValidationError,
    WithJsonSchema,
    field_validator,
    model_validator,
)

from heft.daemon.capture_params import CaptureParams
from heft.daemon.mqtt_settings import MqttSettings
from heft.daemon.physics.swingweight import points_from_label
from heft.drivers.reading import ChannelRef, ChannelRefError
from heft.drivers.units import UnitError, parse_quantity

NAME_PATTERN = r"^[A-Za-z0-9][A-Za-z0-9_.-]*$"
CHANNEL_PATTERN = r"^[A-Za-z0-9][A-Za-z0-9_.-]*/[0-9]+$"


class ConfigError(ValueError):
    """A station config that cannot be used; the message names the field and the expected form.

    One line per problem (``<file>: <field path>: <what was expected>``).
    """


def _quantity(kind: str) -> BeforeValidator:
    def parse(value: object) -> object:
        if isinstance(value, str):
            try:
                return parse_quantity(value, kind=kind)
            except UnitError as err:
                raise ValueError(str(err)) from None
        return value

    return BeforeValidator(parse)


def _channel_ref(value: object) -> ChannelRef:
    """A channel reference from its text; ``"scale"`` is shorthand for ``"scale/0"``."""
    if isinstance(value, ChannelRef):
        return value
    if not isinstance(value, str):
        raise ValueError(f"expected a channel reference text '<device>/<index>', got {value!r}")
    try:
        return ChannelRef.parse(value if "/" in value else f"{value}/0")
    except ChannelRefError:  # say it about the text as written, not the expanded shorthand
        raise ValueError(
            f"{value!r} is not a channel reference; expected '<device>/<index>' such as "
            "'beam/0' (or a one-channel device's name alone, for its channel 0)"
        ) from None


Length = Annotated[float, _quantity("length")]
Mass = Annotated[float, _quantity("mass")]
# Held as a ChannelRef, written and shown as its "<device>/<index>" text.
ChannelField = Annotated[
    ChannelRef,
    PlainValidator(_channel_ref),
    PlainSerializer(str, return_type=str),
    WithJsonSchema({"type": "string", "pattern": CHANNEL_PATTERN}),
]


class _Section(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)


class DeviceConfig(_Section):
    """One device: a scale, a load-cell beam or a scanner."""

    name: str = Field(pattern=NAME_PATTERN, description="short name; channels are '<name>/<n>'")
    driver: str = Field(min_length=1, description="driver name from the registry, e.g. 'beam'")
    port: str | None = Field(default=None, description="serial port path, e.g. /dev/heft-beam")
    url: str | None = Field(default=None, description="pyserial URL or usb: address")
    baudrate: int | None = Field(default=None, gt=0)
    options: dict[str, Any] = Field(default_factory=dict, description="driver options")
    serial: dict[str, Any] = Field(
        default_factory=dict, description="serial line settings: parity, stopbits, dtr, ..."
    )
    silence_timeout_s: float | None = Field(
        default=None,
        ge=0,
        description="reconnect after this long without a byte; default 2 s (0 = never, "
        "the default for scanners)",
    )

    @model_validator(mode="after")
    def _one_address(self) -> DeviceConfig:
        if (self.port is None) == (self.url is None):
            raise ValueError("give exactly one of 'port' (a device path) or 'url'")
        return self

    @property
    def address(self) -> str:
        """Where the transport opens: the port path or the URL."""
        return self.port if self.port is not None else str(self.url)

    @property
    def transport_options(self) -> dict[str, Any]:
        opts = dict(self.serial)
        if self.baudrate is not None:
            opts["baudrate"] = self.baudrate
        return opts

    @property
    def silence_limit_s(self) -> float | None:
        """Seconds of silence that count as a lost device, or None (scanners talk rarely)."""
        if self.silence_timeout_s is None:
            return None if self.driver == "scanner" else 2.0
        return self.silence_timeout_s or None


class TwoSupportGeometry(_Section):
    """Two supports (two scales, or two cells under one beam) at positions from the butt stop."""

    type: Literal["two_support"]
    channel_a: ChannelField = Field(description="support nearer the butt")
    position_a_in: Length = Field(ge=0, description="from the butt stop")
    channel_b: ChannelField = Field(description="support nearer the head")
    position_b_in: Length = Field(ge=0, description="from the butt stop")
    position_u_in: Length = Field(
        default=0.02, ge=0, description="standard uncertainty of each support position"
    )

    @model_validator(mode="after")
    def _distinct(self) -> TwoSupportGeometry:
        if self.channel_a == self.channel_b:
            raise ValueError("channel_a and channel_b must be different channels")
        if abs(self.position_b_in - self.position_a_in) < 1.0:
            raise ValueError("position_a_in and position_b_in must be at least 1 in apart")
        return self

    @property
    def channels(self) -> tuple[str, ...]:
        return (str(self.channel_a), str(self.channel_b))


class LeverBeamGeometry(_Section):
    """A beam pivoting at the fulcrum; a force read at a lever arm, plus a gram scale for W."""

    type: Literal["lever_beam"]
    force_channel: ChannelField = Field(description="load cell or scale under the lever arm")
    lever_arm_in: Length = Field(gt=0, description="from the pivot to the force reading")
    lever_arm_u_in: Length = Field(default=0.01, ge=0, description="standard uncertainty")
    weight_channel: ChannelField = Field(description="gram scale weighing the whole club")
    fulcrum_in: Length = Field(default=14.0, gt=0, description="pivot distance from the butt")
    pairing_window_s: float = Field(
        default=300.0, gt=0, description="a weighing and a beam reading further apart don't pair"
    )

    @model_validator(mode="after")
    def _distinct(self) -> LeverBeamGeometry:
        if self.force_channel == self.weight_channel:
            raise ValueError("force_channel and weight_channel must be different channels")
        return self

    @property
    def channels(self) -> tuple[str, ...]:
        return (str(self.force_channel), str(self.weight_channel))


class SingleScaleGeometry(_Section):
    """One gram scale; the balance point is entered per club (command or scanner tag)."""

    type: Literal["single_scale"]
    weight_channel: ChannelField
    balance_point_u_in: Length = Field(
        default=0.07, ge=0, description="standard uncertainty of an entered balance point"
    )
    balance_point_prefix: str = Field(
        default="BP:", min_length=1, description="scanner tags starting with this set the BP"
    )
    pairing_window_s: float = Field(default=300.0, gt=0)

    @property
    def channels(self) -> tuple[str, ...]:
        return (str(self.weight_channel),)


Geometry = Annotated[
    TwoSupportGeometry | LeverBeamGeometry | SingleScaleGeometry, Field(discriminator="type")
]
GEOMETRY_TYPES: tuple[str, ...] = ("two_support", "lever_beam", "single_scale")


class ChannelConfig(_Section):
    """Calibration of one load-cell channel (its display step is ``[capture]``'s division_g).

    Load-cell channels (raw counts) need ``counts_per_g``/``zero_counts`` either here
    (``source = "config"``) or from the database's latest calibration (``source = "database"``).
    """

    source: Literal["config", "database"] = "database"
    zero_counts: float | None = None
    counts_per_g: float | None = None
    calibration_interval_days: int = Field(default=90, ge=1)
    calibration_warn_days: int = Field(default=7, ge=0)

    @model_validator(mode="after")
    def _config_values(self) -> ChannelConfig:
        if self.source == "config" and (self.zero_counts is None or self.counts_per_g is None):
            raise ValueError("source = 'config' needs both zero_counts and counts_per_g")
        if self.counts_per_g == 0:
            raise ValueError("counts_per_g must not be 0")
        return self


def _label(value: object) -> object:
    if isinstance(value, str):
        points_from_label(value)  # raises ValueError naming the form
    return value


SwingLabel = Annotated[str, BeforeValidator(_label)]


class MassRange(_Section):
    min_g: Mass
    max_g: Mass

    @model_validator(mode="after")
    def _ordered(self) -> MassRange:
        if self.max_g <= self.min_g:
            raise ValueError("max_g must be greater than min_g")
        return self


class LengthRange(_Section):
    min_in: Length
    max_in: Length

    @model_validator(mode="after")
    def _ordered(self) -> LengthRange:
        if self.max_in <= self.min_in:
            raise ValueError("max_in must be greater than min_in")
        return self


class ClubTarget(_Section):
    """Per-club overrides inside a spec (e.g. a wedge two points heavier than the 7-iron)."""

    swingweight: SwingLabel | None = None
    tolerance_points: float | None = Field(default=None, gt=0)
    total_weight: MassRange | None = None
    balance_point: LengthRange | None = None


class SpecConfig(_Section):
    """What a club must measure to pass."""

    swingweight: SwingLabel | None = Field(default=None, description="target label, e.g. 'D2'")
    tolerance_points: float = Field(default=0.5, gt=0)
    total_weight: MassRange | None = None
    balance_point: LengthRange | None = None
    near_limit_fraction: float = Field(
        default=0.2, ge=0, lt=1, description="inner share of each half-band that warns"
    )
    clubs: dict[str, ClubTarget] = Field(default_factory=dict)


class JobConfig(_Section):
    spec: str
    description: str = ""


class StorageConfig(_Section):
    path: Path = Field(description="SQLite file; relative paths are from the config file")


class StationConfig(_Section):
    """A whole station."""

    station: str = Field(pattern=NAME_PATTERN)
    job: str | None = None
    spec: str | None = None
    club: str | None = None
    storage: StorageConfig
    devices: list[DeviceConfig] = Field(min_length=1)
    geometry: Geometry
    channels: dict[str, ChannelConfig] = Field(default_factory=dict)
    capture: CaptureParams = Field(default_factory=CaptureParams)
    specs: dict[str, SpecConfig] = Field(default_factory=dict)
    jobs: dict[str, JobConfig] = Field(default_factory=dict)
    mqtt: MqttSettings = Field(default_factory=lambda: MqttSettings(enabled=False))

    @field_validator("channels")
    @classmethod
    def _channel_names(cls, value: dict[str, ChannelConfig]) -> dict[str, ChannelConfig]:
        for name in value:
            ChannelRef.parse(name)  # raises naming the text and the expected form
        return value

    @model_validator(mode="after")
    def _references(self) -> StationConfig:
        problems: list[tuple[str, str]] = []
        drivers: dict[str, str] = {}
        for d in self.devices:
            if d.name in drivers:
                problems.append(("devices", f"device name {d.name!r} is used twice"))
            drivers[d.name] = d.driver
        read = dict(_geometry_channel_fields(self.geometry))
        for field, ref in read.items():
            why = _channel_problem(ref, drivers)
            if why is not None:
                problems.append((f"geometry.{field}", why))
        for channel in self.channels:
            ref = ChannelRef.parse(channel)  # the key was checked by _channel_names
            why = _channel_problem(ref, drivers)
            if why is None and ref not in read.values():
                why = (
                    f"the geometry reads no channel {channel!r} (it reads "
                    f"{', '.join(sorted({str(r) for r in read.values()}))})"
                )
            if why is not None:
                problems.append((f"channels.{channel}", why))
        for job_name, job in self.jobs.items():
            if job.spec not in self.specs:
                problems.append((
                    f"jobs.{job_name}.spec",
                    f"{job.spec!r} is not a spec; specs: {sorted(self.specs)}",
                ))
        if self.job is not None and self.job not in self.jobs:
            problems.append(("job", f"{self.job!r} is not a job; jobs: {sorted(self.jobs)}"))
        if self.spec is not None and self.spec not in self.specs:
            problems.append(("spec", f"{self.spec!r} is not a spec; specs: {sorted(self.specs)}"))
        if problems:
            raise _FieldProblem(problems)
        return self

    def device(self, name: str) -> DeviceConfig:
        for d in self.devices:
            if d.name == name:
                return d
        raise KeyError(name)

    def channel(self, name: str) -> ChannelConfig:
        """The channel's config, or the defaults when the file has none for it."""
        return self.channels.get(name, ChannelConfig())

    def active_spec_name(self) -> str | None:
        if self.job is not None:
            return self.jobs[self.job].spec
        return self.spec

    def resolve_paths(self, base: Path) -> StationConfig:
        """Make a relative storage path relative to ``base`` (the config file's folder)."""
        path = self.storage.path.expanduser()
        if not path.is_absolute():
            path = (base / path).resolve()
        return self.model_copy(update={"storage": StorageConfig(path=path)})


# How many weight channels a driver reads, where it is fixed: the balances and the HID scale
# read one (docs/protocols.md), a scanner reads club ids only. A beam says how many in its
# HELLO (``ch=``), so its channel indexes are checked when it connects, not here.
DRIVER_CHANNELS: dict[str, int] = {
    "poll_balance": 1,
    "stream_balance": 1,
    "regex_line": 1,
    "hid_pos": 1,
    "scanner": 0,
}


def _channel_problem(ref: ChannelRef, drivers: dict[str, str]) -> str | None:
    """Why ``ref`` is not a weight channel of a configured device."""
    channel, device = str(ref), ref.device
    driver = drivers.get(device)
    if driver is None:
        return f"{channel!r} names no device; devices: {sorted(drivers)}"
    count = DRIVER_CHANNELS.get(driver)
    if count == 0:
        return f"{channel!r} is a {driver}, which reads club ids, not weights"
    if count is not None and ref.index >= count:
        return f"{channel!r}: a {driver} device reads only {device}/0"
    return None


def _geometry_channel_fields(geometry: BaseModel) -> list[tuple[str, ChannelRef]]:
    return [
        (name, getattr(geometry, name))
        for name in type(geometry).model_fields
        if name.endswith("channel") or name.startswith("channel_")
    ]


class _FieldProblem(ValueError):
    """Cross-field problems that know their own paths (raised inside a model validator)."""

    def __init__(self, problems: list[tuple[str, str]]) -> None:
        super().__init__("; ".join(f"{path}: {message}" for path, message in problems))
        self.problems = problems


def _format_loc(loc: tuple[int | str, ...]) -> str:
    parts: list[str] = []
    for i, item in enumerate(loc):
        if isinstance(item, int):
            parts.append(f"[{item}]")
            continue
        # A discriminated union puts the tag in the path (geometry.two_support.x): drop it.
        if i > 0 and loc[i - 1] == "geometry" and item in GEOMETRY_TYPES:
            continue
        # Functions in the path (BeforeValidator wrappers) appear as 'function-before[...]'.
        if item.startswith("function-"):
            continue
        parts.append(item if not parts else f".{item}")
    return "".join(parts) or "(top level)"


def _expected(err: Any) -> str:
    msg = str(err["msg"])
    for prefix in ("Value error, ", "Assertion failed, "):
        if msg.startswith(prefix):
            msg = msg[len(prefix) :]
    kind = err["type"]
    if kind == "missing":
        return "is required"
    if kind == "extra_forbidden":
        return _unknown_field(tuple(err["loc"]))
    if kind == "union_tag_invalid" or kind == "union_tag_not_found":
        return f"'type' must be one of {', '.join(GEOMETRY_TYPES)}"
    got = err.get("input")
    if kind not in ("value_error",) and got is not None and not isinstance(got, dict | list):
        return f"{msg} (got {got!r})"
    return msg


def _unknown_field(loc: tuple[int | str, ...]) -> str:
    """'unknown field', with the nearest known name (difflib) or the known names."""
    known = _fields_at(loc[:-1])
    typed = str(loc[-1])
    near = difflib.get_close_matches(typed, known, n=1, cutoff=0.6)
    if near:
        return f"unknown field; did you mean {near[0]!r}?"
    if known:
        return f"unknown field; expected one of {', '.join(known)}"
    return "unknown field"


def _fields_at(loc: tuple[int | str, ...]) -> list[str]:
    """Field names of the config table at ``loc`` (empty when it is not a model)."""
    tp: Any = StationConfig
    for item in loc:
        if isinstance(item, str) and item.startswith("function-"):
            continue
        tp, consumed = _unwrap(tp, item)
        if consumed:  # the item was a tagged union's tag (geometry.two_support...)
            continue
        if isinstance(tp, type) and issubclass(tp, BaseModel):
            field = tp.model_fields.get(str(item))
            if field is None:
                return []
            tp = field.annotation
        elif get_origin(tp) is list:
            tp = get_args(tp)[0]
        elif get_origin(tp) is dict:
            tp = get_args(tp)[1]
        else:
            return []
    tp, _ = _unwrap(tp, None)
    if isinstance(tp, type) and issubclass(tp, BaseModel):
        return list(tp.model_fields)
    return []


def _unwrap(tp: Any, tag: int | str | None) -> tuple[Any, bool]:
    """Strip Annotated and Optional; pick a tagged union's member by its ``type`` tag.

    Returns the type and whether ``tag`` picked a union member (and so is used up).
    """
    while get_origin(tp) is Annotated:
        tp = get_args(tp)[0]
    members = [a for a in get_args(tp) if a is not type(None)] if _is_union(tp) else []
    if len(members) == 1:
        return _unwrap(members[0], tag)
    for m in members:
        tagged = isinstance(m, type) and issubclass(m, BaseModel) and "type" in m.model_fields
        if tagged and tag in get_args(m.model_fields["type"].annotation):
            return m, True
    return tp, False


def _is_union(tp: Any) -> bool:
    return get_origin(tp) in (Union, types.UnionType)


def problem_lines(err: ValidationError) -> list[str]:
    """Every problem, one per line: the field path and the expected form; unknown keys first."""
    lines: list[str] = []
    for e in sorted(err.errors(), key=lambda e: e["type"] != "extra_forbidden"):
        ctx_err = e.get("ctx", {}).get("error")
        if isinstance(ctx_err, _FieldProblem):
            lines.extend(f"{path}: {message}" for path, message in ctx_err.problems)
        else:
            lines.append(f"{_format_loc(tuple(e['loc']))}: {_expected(e)}")
    return lines


def format_validation_error(err: ValidationError) -> str:
    """Every problem on its own line (see ``problem_lines``)."""
    return "\n".join(problem_lines(err))


def check_drivers(config: StationConfig) -> None:
    """Each device's driver exists and accepts its options (the driver's own model says how)."""
    from heft.drivers.base import DriverConfigError
    from heft.drivers.registry import get_driver_class
    from heft.drivers.transport import USB_HID_SCHEME, SerialSettings

    for i, device in enumerate(config.devices):
        if not device.address.startswith(USB_HID_SCHEME):
            try:
                SerialSettings.model_validate(device.transport_options)
            except ValidationError as err:
                first = err.errors()[0]
                where = ".".join(str(p) for p in first["loc"])
                field = "baudrate" if where == "baudrate" else f"serial.{where}"
                raise ConfigError(f"devices[{i}].{field}: {_expected(first)}") from None
        try:
            cls = get_driver_class(device.driver)
        except DriverConfigError as err:
            raise ConfigError(f"devices[{i}].driver: {err}") from None
        try:
            cls(device.name, device.options)
        except DriverConfigError as err:
            raise ConfigError(f"devices[{i}].options: {err}") from None


def parse_config(data: dict[str, Any], base: Path | None = None) -> StationConfig:
    """Validate an already-parsed TOML document; raise ConfigError with one clear line."""
    try:
        config = StationConfig.model_validate(data)
    except ValidationError as err:
        raise ConfigError(format_validation_error(err)) from None
    check_drivers(config)
    return config.resolve_paths(base) if base is not None else config


def load_config(path: Path) -> StationConfig:
    """Read and validate a station config file; ``-`` reads standard input."""
    if str(path) == "-":
        return load_config_text(sys.stdin.read(), "<stdin>", Path.cwd())
    try:
        text = path.read_text(encoding="utf-8")
    except OSError as err:
        raise ConfigError(f"{path}: cannot read ({err.strerror})") from None
    return load_config_text(text, str(path), path.parent.resolve())


def load_config_text(text: str, source: str, base: Path) -> StationConfig:
    """Validate config text; ``source`` starts every problem line, ``base`` anchors paths."""
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as err:
        raise ConfigError(f"{source}: not valid TOML: {err}") from None
    try:
        return parse_config(data, base=base)
    except ConfigError as err:
        lines = [f"{source}: {line}" for line in str(err).splitlines()]
        raise ConfigError("\n".join(lines)) from None
