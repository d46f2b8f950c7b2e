"""The fixture format of a simulated USB device: definitions and report sequences (pydantic).

Device definitions and report sequences are JSON (format in hardware_fixtures/usb/README.md),
validated here so a bad fixture names its field.
"""

from __future__ import annotations

import json
from pathlib import Path
from typing import Annotated, Any, Final, Literal, TypeVar

from pydantic import (
    BaseModel,
    BeforeValidator,
    ConfigDict,
    Field,
    ValidationError,
    field_validator,
    model_validator,
)

from heft.drivers.validation import problem_lines

FORMAT_VERSION: Final = 1
DEVICE_FORMAT: Final = "heft-usb-device"
SEQUENCE_FORMAT: Final = "heft-usb-sequence"


class FixtureError(ValueError):
    """A device definition or report sequence that cannot be used; the message says why."""


# -- fixture format (pydantic models) -----------------------------------------------------------


def _int_or_hex(value: Any) -> Any:
    """Accept 4617 or "0x1209" (ids read better in hex)."""
    if isinstance(value, str):
        try:
            return int(value, 16) if value.lower().startswith("0x") else int(value)
        except ValueError:
            raise ValueError(f"{value!r} is not an integer or 0x-prefixed hex") from None
    return value


def _hex_bytes(value: Any) -> Any:
    """Accept "03 04 02 00 e8 03" (spaces optional) as bytes."""
    if isinstance(value, str):
        try:
            return bytes.fromhex(value)
        except ValueError:
            raise ValueError(f"{value!r} is not hex bytes such as '03 04 02 00 e8 03'") from None
    return value


HexInt = Annotated[int, BeforeValidator(_int_or_hex)]
HexBytes = Annotated[bytes, BeforeValidator(_hex_bytes)]


class _Strict(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)


def _check_version(value: int) -> int:
    if value != FORMAT_VERSION:
        raise ValueError(f"fixture format version {value} is not supported; this heft reads "
                         f"version {FORMAT_VERSION}")
    return value


class DeviceDescriptorSpec(_Strict):
    """Device descriptor fields and the three strings."""

    idVendor: HexInt = Field(ge=0, le=0xFFFF)
    idProduct: HexInt = Field(ge=0, le=0xFFFF)
    bcdUSB: HexInt = 0x0200
    bcdDevice: HexInt = 0x0100
    bMaxPacketSize0: int = 8
    manufacturer: str = ""
    product: str = ""
    serial_number: str = ""
    bus: int = 1
    address: int = Field(default=2, ge=1, le=127)
    port_numbers: tuple[int, ...] = (1,)
    speed: int = 2  # libusb_speed: 2 = full speed (12 Mbit/s), usual for HID scales


class EndpointSpec(_Strict):
    bEndpointAddress: HexInt
    bmAttributes: int = 3  # interrupt
    wMaxPacketSize: int = Field(default=8, ge=1, le=1024)
    bInterval: int = 10


class InterfaceSpec(_Strict):
    """The HID interface: class 3, its HID descriptor and report descriptor, its endpoints."""

    bInterfaceNumber: int = 0
    bInterfaceSubClass: int = 0  # 1 would be a boot keyboard/mouse; scales are 0
    bInterfaceProtocol: int = 0
    bcdHID: HexInt = 0x0111
    bCountryCode: int = 0
    report_descriptor: HexBytes
    endpoints: tuple[EndpointSpec, ...] = Field(min_length=1)

    @field_validator("endpoints")
    @classmethod
    def _has_interrupt_in(cls, value: tuple[EndpointSpec, ...]) -> tuple[EndpointSpec, ...]:
        if not any(ep.bEndpointAddress & 0x80 and ep.bmAttributes & 3 == 3 for ep in value):
            raise ValueError("a HID interface needs an interrupt IN endpoint (address 0x8N)")
        return value


class ConfigurationSpec(_Strict):
    bConfigurationValue: int = 1
    bmAttributes: HexInt = 0x80
    bMaxPower: int = 50  # in 2 mA units


class UsbDeviceDefinition(_Strict):
    """A simulated device's identity and descriptors (file format ``heft-usb-device``)."""

    format: Literal["heft-usb-device"]
    version: int
    name: str
    description: str = ""
    device: DeviceDescriptorSpec
    configuration: ConfigurationSpec = ConfigurationSpec()
    interface: InterfaceSpec
    kernel_driver_active: bool = True
    access_denied: bool = False

    _v = field_validator("version")(_check_version)


class ReportEvent(_Strict):
    """One step of a sequence: a report arriving at ``t`` seconds, or the cable pulled."""

    t: float = Field(ge=0)
    rx: HexBytes | None = None
    unplug: bool = False
    expect: Any = None  # what a test expects the driver to make of it; ignored by the fake
    note: str = ""

    @model_validator(mode="after")
    def _one_kind(self) -> ReportEvent:
        if (self.rx is None) == (not self.unplug):
            raise ValueError("an event has exactly one of 'rx' (report hex) or 'unplug': true")
        return self


EndMode = Literal["silent", "hold", "loop"]


class ReportSequence(_Strict):
    """Reports a device sends over time (file format ``heft-usb-sequence``)."""

    format: Literal["heft-usb-sequence"]
    version: int
    device: str
    description: str = ""
    end: EndMode = "silent"
    hold_interval_s: float = Field(default=0.2, gt=0)
    kernel_driver_active: bool | None = None
    events: tuple[ReportEvent, ...]

    _v = field_validator("version")(_check_version)

    @field_validator("events")
    @classmethod
    def _in_time_order(cls, value: tuple[ReportEvent, ...]) -> tuple[ReportEvent, ...]:
        for i in range(1, len(value)):
            if value[i].t < value[i - 1].t:
                raise ValueError(f"event {i} at t={value[i].t} is earlier than event {i - 1}")
        return value


_M = TypeVar("_M", bound=BaseModel)


def _validated(model: type[_M], data: Any, source: str) -> _M:
    try:
        return model.model_validate(data)
    except ValidationError as err:
        detail = "; ".join(problem_lines(err, model, top="(top)"))
        raise FixtureError(f"{source}: {detail}") from None


def _read_json(path: Path) -> Any:
    try:
        return json.loads(path.read_text(encoding="utf-8"))
    except (OSError, json.JSONDecodeError) as err:
        raise FixtureError(f"{path}: {err}") from err


def load_device_definition(path: Path) -> UsbDeviceDefinition:
    """Read and validate a ``heft-usb-device`` JSON file."""
    return _validated(UsbDeviceDefinition, _read_json(path), str(path))


def load_sequence(path: Path) -> tuple[UsbDeviceDefinition, ReportSequence]:
    """Read a ``heft-usb-sequence`` file and the device definition it names.

    The device is looked up as ``<sequence dir>/../devices/<device>.json``.
    """
    sequence = _validated(ReportSequence, _read_json(path), str(path))
    device_path = path.parent.parent / "devices" / f"{sequence.device}.json"
    if not device_path.is_file():
        raise FixtureError(f"{path}: device {sequence.device!r} not found at {device_path}")
    return load_device_definition(device_path), sequence

