"""The tables of a station config, one pydantic model each (the whole file is
:class:`heft.daemon.config.StationConfig`, which also checks references between them).

Lengths and masses accept unit suffixes (``"36in"``, ``"914mm"``, ``"390g"``, ``"13.7oz"``);
bare numbers are inches and grams. Channel fields hold a
:class:`~heft.drivers.reading.ChannelRef`, written as ``"<device>/<index>"``.
"""

from __future__ import annotations

from pathlib import Path
from typing import Annotated, Any, Literal

from pydantic import (
    BaseModel,
    BeforeValidator,
    ConfigDict,
    Field,
    PlainSerializer,
    PlainValidator,
    WithJsonSchema,
    model_validator,
)

from heft.daemon.physics.swingweight import points_from_label
from heft.drivers.reading import CHANNEL_PATTERN as CHANNEL_PATTERN
from heft.drivers.reading import (
    DEVICE_NAME_PATTERN,
    ChannelRef,
    ChannelRefError,
)
from heft.drivers.units import UnitError, parse_quantity

NAME_PATTERN = DEVICE_NAME_PATTERN  # station and device names alike


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


class ConfigSection(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)


class DeviceConfig(ConfigSection):
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


class TwoSupportGeometry(ConfigSection):
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


class LeverBeamGeometry(ConfigSection):
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


class SingleScaleGeometry(ConfigSection):
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


class ChannelConfig(ConfigSection):
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


class MassRange(ConfigSection):
    min_g: Mass
    max_g: Mass

    @model_validator(mode="after")
    def _ordered(self) -> MassRange:
        if self.max_g <= self.min_g:
            raise ValueError("max_g must be greater than min_g")
        return self


class LengthRange(ConfigSection):
    min_in: Length
    max_in: Length

    @model_validator(mode="after")
    def _ordered(self) -> LengthRange:
        if self.max_in <= self.min_in:
            raise ValueError("max_in must be greater than min_in")
        return self


class ClubTarget(ConfigSection):
    """Per-club overrides inside a spec (e.g. a wedge two points heavier than the 7-iron)."""

    swingweight: SwingLabel | None = None
    tolerance_points: float | None = Field(default=None, gt=0)
    total_weight: MassRange | None = None
    balance_point: LengthRange | None = None


class SpecConfig(ConfigSection):
    """What a club must measure to pass."""

    swingweight: SwingLabel | None = Field(default=None, description="target label, e.g. 'D2'")
    tolerance_points: float = Field(default=0.5, gt=0)
    total_weight: MassRange | None = None
    balance_point: LengthRange | None = None
    near_limit_fraction: float = Field(
        default=0.2, ge=0, lt=1, description="inner share of each half-band that warns"
    )
    clubs: dict[str, ClubTarget] = Field(default_factory=dict)


class JobConfig(ConfigSection):
    spec: str
    description: str = ""


class StorageConfig(ConfigSection):
    path: Path = Field(description="SQLite file; relative paths are from the config file")


class CommandsConfig(ConfigSection):
    """Who may change the station over MQTT (docs/service.md, "Operator keys")."""

    keys_file: Path | None = Field(
        default=None,
        description="operator keys, one 'OPERATOR HEX-KEY' line each, mode 0600; relative "
        "paths are from the config file",
    )
    open_bench: bool = Field(
        default=False, description="take unsigned state-changing commands (trusted network only)"
    )
    window_s: float = Field(
        default=30.0, gt=0, le=600, description="how far a signed command's time may be off"
    )
