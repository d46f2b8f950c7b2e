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

This module holds the whole file (:class:`StationConfig`, its cross-references), loading and
the problem lines; the tables themselves are in :mod:`heft.daemon.config_sections`.
"""

from __future__ import annotations

import sys
import tomllib
from pathlib import Path
from typing import Any

from pydantic import (
    BaseModel,
    Field,
    ValidationError,
    field_validator,
    model_validator,
)

from heft.daemon.capture_params import CaptureParams, keyed_by_channel
from heft.daemon.config_sections import (
    CHANNEL_PATTERN,
    GEOMETRY_TYPES,
    NAME_PATTERN,
    ChannelConfig,
    ChannelField,
    ClubTarget,
    CommandsConfig,
    ConfigSection,
    DeviceConfig,
    Geometry,
    JobConfig,
    Length,
    LengthRange,
    LeverBeamGeometry,
    Mass,
    MassRange,
    SingleScaleGeometry,
    SpecConfig,
    StorageConfig,
    SwingLabel,
    TwoSupportGeometry,
)
from heft.daemon.mqtt_settings import MqttSettings
from heft.drivers.reading import ChannelRef
from heft.drivers.validation import FieldProblems as _FieldProblem
from heft.drivers.validation import problem_lines as validation_problem_lines

# The tables live in heft.daemon.config_sections; they are named here too, where every user
# of the config has always imported them from.
__all__ = [
    "CHANNEL_PATTERN",
    "DRIVER_CHANNELS",
    "GEOMETRY_TYPES",
    "NAME_PATTERN",
    "ChannelConfig",
    "ChannelField",
    "ClubTarget",
    "ConfigError",
    "DeviceConfig",
    "Geometry",
    "JobConfig",
    "Length",
    "LengthRange",
    "LeverBeamGeometry",
    "Mass",
    "MassRange",
    "SingleScaleGeometry",
    "SpecConfig",
    "StationConfig",
    "StorageConfig",
    "SwingLabel",
    "TwoSupportGeometry",
    "check_drivers",
    "format_validation_error",
    "load_config",
    "load_config_text",
    "parse_config",
    "problem_lines",
]


class ConfigError(ValueError):
    """A station config that cannot be used; the message names the field and the expected form.

    One line per problem (``<file>: <field path>: <what was expected>``).
    """


class StationConfig(ConfigSection):
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
    commands: CommandsConfig = Field(default_factory=CommandsConfig)

    @field_validator("channels")
    @classmethod
    def _channel_names(cls, value: dict[str, ChannelConfig]) -> dict[str, ChannelConfig]:
        return keyed_by_channel(value)

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
        """Make relative storage and key file paths relative to ``base`` (the config's folder)."""
        update: dict[str, Any] = {"storage": StorageConfig(path=_under(base, self.storage.path))}
        if self.commands.keys_file is not None:
            update["commands"] = self.commands.model_copy(
                update={"keys_file": _under(base, self.commands.keys_file)}
            )
        return self.model_copy(update=update)


def _under(base: Path, path: Path) -> Path:
    path = path.expanduser()
    return path if path.is_absolute() else (base / path).resolve()


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


def problem_lines(err: ValidationError) -> list[str]:
    """Every problem, one per line: the field path and the expected form; unknown keys first."""
    return validation_problem_lines(err, StationConfig)


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
                line = validation_problem_lines(err, SerialSettings, first_only=True)[0]
                field = line if line.startswith("baudrate:") else f"serial.{line}"
                raise ConfigError(f"devices[{i}].{field}") from None
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
