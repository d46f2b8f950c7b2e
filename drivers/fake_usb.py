"""A pyusb backend that plays a USB HID scale from data, for tests, the simulator and demos.

The real scale cannot be on a CI machine, so this module stands in for libusb below pyusb's own
``usb.core`` API: ``usb.core.find(backend=FakeBackend(...))`` returns a real ``usb.core.Device``
whose descriptors, strings, transfers and kernel-driver calls land here. It behaves as libusb
does on Linux, faults included:

- the kernel's HID driver is bound at start: claiming the interface or setting the configuration
  fails with EBUSY until it is detached, and re-attaching fails while the interface is claimed;
- an interrupt read with nothing due within its timeout raises ``USBTimeoutError``;
- after an ``unplug`` event every call raises ``USBError`` with errno ENODEV and the device
  leaves the enumeration;
- a report longer than the read buffer raises EOVERFLOW; an unknown control request stalls
  (EPIPE); an ``access_denied`` device refuses to open (EACCES).

Device definitions and report sequences are JSON (format in hardware_fixtures/usb/README.md),
validated with pydantic so a bad fixture names its field. The backend records what the host did
(``FakeUsbDevice.history``, ``control_log``, ``out_reports``) so tests can assert it.

Time: ``pace="virtual"`` runs a virtual clock that jumps to the next report (tests never sleep);
``pace="realtime"`` waits on the wall clock (simulator, demo).
"""

from __future__ import annotations

import array
import errno
import json
import struct
import threading
import time
from collections.abc import Iterable, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Annotated, Any, Final, Literal, TypeVar

import usb.backend
import usb.core
from pydantic import (
    BaseModel,
    BeforeValidator,
    ConfigDict,
    Field,
    ValidationError,
    field_validator,
    model_validator,
)

from heft.drivers import units
from heft.drivers.protocols.hid_pos import (
    CONTROL_REPORT_ID,
    STATUS_NAMES,
    ScaleStatus,
    encode_data_report,
    unit_code_for,
)
from heft.drivers.validation import problem_lines

FORMAT_VERSION: Final = 1
DEVICE_FORMAT: Final = "heft-usb-device"
SEQUENCE_FORMAT: Final = "heft-usb-sequence"

# libusb error codes and strerror texts, so errors read as they would from the real backend.
_LIBUSB_ERRORS: Final[dict[int, tuple[int, str]]] = {
    errno.EIO: (-1, "Input/Output Error"),
    errno.EACCES: (-3, "Access denied (insufficient permissions)"),
    errno.ENODEV: (-4, "No such device (it may have been disconnected)"),
    errno.ENOENT: (-5, "Entity not found"),
    errno.EBUSY: (-6, "Resource busy"),
    errno.EOVERFLOW: (-8, "Overflow"),
    errno.EPIPE: (-9, "Pipe error"),
}

# USB standard / HID class requests the fake answers.
_GET_DESCRIPTOR: Final = 0x06
_HID_GET_REPORT: Final = 0x01
_HID_SET_REPORT: Final = 0x09
_HID_SET_IDLE: Final = 0x0A
_DESC_DEVICE: Final = 0x01
_DESC_CONFIG: Final = 0x02
_DESC_STRING: Final = 0x03
_DESC_HID_REPORT: Final = 0x22
_LANGID_EN_US: Final = 0x0409
_REPORT_TYPE_INPUT: Final = 1
_REPORT_TYPE_OUTPUT: Final = 2
_IDLE_REAL_WAIT_S: Final = 0.02


class FixtureError(ValueError):
    """A device definition or report sequence that cannot be used; the message says why."""


def _usb_error(code: int, detail: str = "") -> usb.core.USBError:
    backend_code, text = _LIBUSB_ERRORS[code]
    return usb.core.USBError(f"{text}{': ' + detail if detail else ''}", backend_code, code)


def _timeout_error() -> usb.core.USBTimeoutError:
    return usb.core.USBTimeoutError("Operation timed out", -7, errno.ETIMEDOUT)


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


# -- descriptor objects as pyusb expects them from a backend -----------------------------------


@dataclass(slots=True)
class _DeviceDescriptor:
    idVendor: int
    idProduct: int
    bcdUSB: int
    bcdDevice: int
    bMaxPacketSize0: int
    bus: int
    address: int
    port_number: int
    port_numbers: tuple[int, ...]
    speed: int
    bLength: int = 18
    bDescriptorType: int = _DESC_DEVICE
    bDeviceClass: int = 0  # class defined per interface
    bDeviceSubClass: int = 0
    bDeviceProtocol: int = 0
    iManufacturer: int = 1
    iProduct: int = 2
    iSerialNumber: int = 3
    bNumConfigurations: int = 1


@dataclass(slots=True)
class _ConfigDescriptor:
    wTotalLength: int
    bConfigurationValue: int
    bmAttributes: int
    bMaxPower: int
    bLength: int = 9
    bDescriptorType: int = _DESC_CONFIG
    bNumInterfaces: int = 1
    iConfiguration: int = 0
    extra_descriptors: list[int] = field(default_factory=list)


@dataclass(slots=True)
class _InterfaceDescriptor:
    bInterfaceNumber: int
    bNumEndpoints: int
    bInterfaceSubClass: int
    bInterfaceProtocol: int
    extra_descriptors: list[int]
    bLength: int = 9
    bDescriptorType: int = 0x04
    bAlternateSetting: int = 0
    bInterfaceClass: int = 0x03  # HID
    iInterface: int = 0


@dataclass(slots=True)
class _EndpointDescriptor:
    bEndpointAddress: int
    bmAttributes: int
    wMaxPacketSize: int
    bInterval: int
    bLength: int = 7
    bDescriptorType: int = 0x05
    bRefresh: int = 0
    bSynchAddress: int = 0
    extra_descriptors: list[int] = field(default_factory=list)


@dataclass(frozen=True, slots=True)
class ControlTransfer:
    """One control transfer the host made (OUT data, or the length asked for on IN)."""

    bmRequestType: int
    bRequest: int
    wValue: int
    wIndex: int
    data: bytes
    length: int


@dataclass(slots=True)
class _Handle:
    device: FakeUsbDevice
    open: bool = True


# -- the simulated device ---------------------------------------------------------------------


class FakeUsbDevice:
    """One simulated HID scale: descriptors, a report timeline, and a record of host traffic.

    Args:
        definition: Descriptors and identity.
        events: Reports (and an optional unplug) in time order, ``t`` in seconds from open.
        end: After the last event: ``silent`` (timeouts for ever), ``hold`` (repeat the last
            report every ``hold_interval_s``) or ``loop`` (start the sequence again).
        pace: ``virtual`` (a virtual clock jumps ahead; nothing sleeps) or ``realtime``.
        kernel_driver_active: Overrides the definition's flag when not None.
    """

    def __init__(
        self,
        definition: UsbDeviceDefinition,
        events: Sequence[ReportEvent],
        *,
        end: EndMode = "silent",
        hold_interval_s: float = 0.2,
        pace: Literal["virtual", "realtime"] = "virtual",
        kernel_driver_active: bool | None = None,
    ) -> None:
        self.definition = definition
        self.events = tuple(events)
        self.end = end
        self.hold_interval_s = hold_interval_s
        self.pace = pace
        intf = definition.interface
        active = definition.kernel_driver_active if kernel_driver_active is None else (
            kernel_driver_active)
        self.kernel_driver_attached: dict[int, bool] = {intf.bInterfaceNumber: active}
        self.claimed: set[int] = set()
        self.unplugged = False
        self.history: list[str] = []
        self.control_log: list[ControlTransfer] = []
        self.out_reports: list[bytes] = []
        self.reports_sent = 0
        self.timeouts = 0
        self.last_report: bytes | None = None
        self._lock = threading.RLock()
        self._unplug_now = threading.Event()
        self._next = 0  # index of the next event
        self._offset_s = 0.0  # added to event times (loop / hold)
        self._virtual_now_s = 0.0
        self._opened_at: float | None = None
        self._report_descriptor = bytes(intf.report_descriptor)
        self._in_payload = b""  # the data stage of the IN control transfer being answered

    # -- fault injection --------------------------------------------------------------------

    def unplug(self) -> None:
        """Pull the cable now (from any thread): pending and later calls fail with ENODEV."""
        with self._lock:
            self.unplugged = True
            self.history.append("unplugged")
        self._unplug_now.set()

    def replug(self) -> None:
        """Plug the cable back in: the kernel driver binds again; the timeline goes on."""
        with self._lock:
            self.unplugged = False
            self._unplug_now.clear()
            self.claimed.clear()
            for intf in self.kernel_driver_attached:
                self.kernel_driver_attached[intf] = self.definition.kernel_driver_active
            self.history.append("replugged")

    # -- descriptors ------------------------------------------------------------------------

    def device_descriptor(self) -> _DeviceDescriptor:
        d = self.definition.device
        return _DeviceDescriptor(
            idVendor=d.idVendor, idProduct=d.idProduct, bcdUSB=d.bcdUSB, bcdDevice=d.bcdDevice,
            bMaxPacketSize0=d.bMaxPacketSize0, bus=d.bus, address=d.address,
            port_number=d.port_numbers[-1] if d.port_numbers else 0,
            port_numbers=d.port_numbers, speed=d.speed)

    def hid_descriptor(self) -> bytes:
        """The 9-byte HID class descriptor that follows the interface descriptor."""
        i = self.definition.interface
        return struct.pack("<BBHBBBH", 9, 0x21, i.bcdHID, i.bCountryCode, 1, _DESC_HID_REPORT,
                           len(self._report_descriptor))

    def interface_descriptor(self) -> _InterfaceDescriptor:
        i = self.definition.interface
        return _InterfaceDescriptor(
            bInterfaceNumber=i.bInterfaceNumber, bNumEndpoints=len(i.endpoints),
            bInterfaceSubClass=i.bInterfaceSubClass, bInterfaceProtocol=i.bInterfaceProtocol,
            extra_descriptors=list(self.hid_descriptor()))

    def endpoint_descriptor(self, index: int) -> _EndpointDescriptor:
        ep = self.definition.interface.endpoints[index]
        return _EndpointDescriptor(bEndpointAddress=ep.bEndpointAddress,
                                   bmAttributes=ep.bmAttributes,
                                   wMaxPacketSize=ep.wMaxPacketSize, bInterval=ep.bInterval)

    def config_descriptor(self) -> _ConfigDescriptor:
        c = self.definition.configuration
        return _ConfigDescriptor(wTotalLength=len(self.config_descriptor_bytes()),
                                 bConfigurationValue=c.bConfigurationValue,
                                 bmAttributes=c.bmAttributes, bMaxPower=c.bMaxPower)

    def device_descriptor_bytes(self) -> bytes:
        d = self.device_descriptor()
        return struct.pack("<BBHBBBBHHHBBBB", 18, _DESC_DEVICE, d.bcdUSB, 0, 0, 0,
                           d.bMaxPacketSize0, d.idVendor, d.idProduct, d.bcdDevice, 1, 2, 3, 1)

    def config_descriptor_bytes(self) -> bytes:
        c = self.definition.configuration
        i = self.definition.interface
        body = struct.pack("<BBBBBBBBB", 9, 0x04, i.bInterfaceNumber, 0, len(i.endpoints), 0x03,
                           i.bInterfaceSubClass, i.bInterfaceProtocol, 0)
        body += self.hid_descriptor()
        for ep in i.endpoints:
            body += struct.pack("<BBBBHB", 7, 0x05, ep.bEndpointAddress, ep.bmAttributes,
                                ep.wMaxPacketSize, ep.bInterval)
        head = struct.pack("<BBHBBBBB", 9, _DESC_CONFIG, 9 + len(body), 1,
                           c.bConfigurationValue, 0, c.bmAttributes, c.bMaxPower)
        return head + body

    def string_descriptor(self, index: int) -> bytes:
        if index == 0:
            return struct.pack("<BBH", 4, _DESC_STRING, _LANGID_EN_US)
        d = self.definition.device
        strings = {1: d.manufacturer, 2: d.product, 3: d.serial_number}
        if index not in strings:
            raise _usb_error(errno.EPIPE, f"no string descriptor {index}")
        text = strings[index].encode("utf-16-le")
        return bytes((2 + len(text), _DESC_STRING)) + text

    # -- host operations (called by FakeBackend) -------------------------------------------

    def _alive(self) -> None:
        if self.unplugged:
            raise _usb_error(errno.ENODEV)

    def open(self) -> _Handle:
        with self._lock:
            self._alive()
            if self.definition.access_denied:
                raise _usb_error(errno.EACCES)
            if self._opened_at is None:
                self._opened_at = time.monotonic()
            self.history.append("open")
            return _Handle(self)

    def close(self, handle: _Handle) -> None:
        with self._lock:
            handle.open = False
            self.claimed.clear()
            self.history.append("close")

    def _handle_ok(self, handle: _Handle) -> None:
        self._alive()
        if not handle.open:
            raise _usb_error(errno.EIO, "device handle is closed")

    def _interface_ok(self, intf: int) -> None:
        if intf not in self.kernel_driver_attached:
            raise _usb_error(errno.ENOENT, f"no interface {intf}")

    def is_kernel_driver_active(self, handle: _Handle, intf: int) -> bool:
        with self._lock:
            self._handle_ok(handle)
            self._interface_ok(intf)
            return self.kernel_driver_attached[intf]

    def detach_kernel_driver(self, handle: _Handle, intf: int) -> None:
        with self._lock:
            self._handle_ok(handle)
            self._interface_ok(intf)
            if not self.kernel_driver_attached[intf]:
                raise _usb_error(errno.ENOENT, "no kernel driver attached")
            self.kernel_driver_attached[intf] = False
            self.history.append(f"detach {intf}")

    def attach_kernel_driver(self, handle: _Handle, intf: int) -> None:
        with self._lock:
            self._handle_ok(handle)
            self._interface_ok(intf)
            if intf in self.claimed:
                raise _usb_error(errno.EBUSY, "interface is claimed by this program")
            if self.kernel_driver_attached[intf]:
                raise _usb_error(errno.EBUSY, "a kernel driver is already attached")
            self.kernel_driver_attached[intf] = True
            self.history.append(f"attach {intf}")

    def claim(self, handle: _Handle, intf: int) -> None:
        with self._lock:
            self._handle_ok(handle)
            self._interface_ok(intf)
            if self.kernel_driver_attached[intf]:
                raise _usb_error(errno.EBUSY, "the kernel driver holds the interface")
            self.claimed.add(intf)
            self.history.append(f"claim {intf}")

    def release(self, handle: _Handle, intf: int) -> None:
        with self._lock:
            self._handle_ok(handle)
            if intf not in self.claimed:
                raise _usb_error(errno.ENOENT, f"interface {intf} is not claimed")
            self.claimed.discard(intf)
            self.history.append(f"release {intf}")

    def set_configuration(self, handle: _Handle, value: int) -> None:
        with self._lock:
            self._handle_ok(handle)
            if any(self.kernel_driver_attached.values()):
                raise _usb_error(errno.EBUSY, "a kernel driver is bound to an interface")
            if value != self.definition.configuration.bConfigurationValue:
                raise _usb_error(errno.ENOENT, f"no configuration {value}")
            self.history.append(f"set_configuration {value}")

    def get_configuration(self, handle: _Handle) -> int:
        with self._lock:
            self._handle_ok(handle)
            return self.definition.configuration.bConfigurationValue

    def _endpoint(self, address: int) -> EndpointSpec:
        for ep in self.definition.interface.endpoints:
            if ep.bEndpointAddress == address:
                return ep
        raise _usb_error(errno.ENOENT, f"no endpoint 0x{address:02X}")

    def interrupt_read(self, handle: _Handle, ep: int, intf: int, buff: array.array[int],
                       timeout_ms: int) -> int:
        """Deliver the next report due within ``timeout_ms`` or raise a timeout."""
        with self._lock:
            self._handle_ok(handle)
            self._endpoint(ep)
            if intf not in self.claimed:
                raise _usb_error(errno.EBUSY, f"interface {intf} is not claimed")
        timeout_s = timeout_ms / 1000.0 if timeout_ms > 0 else float("inf")
        event, due_s = self._next_event()
        now_s = self._now()
        if event is None or due_s > now_s + timeout_s:
            self._wait(timeout_s, idle=event is None)
            with self._lock:
                self.timeouts += 1
            raise _timeout_error()
        if due_s > now_s:
            self._wait(due_s - now_s)
        with self._lock:
            self._handle_ok(handle)  # unplugged or closed while we waited
            self._advance()
            if event.unplug:
                self.unplugged = True
                self.history.append("unplugged")
                raise _usb_error(errno.ENODEV)
            report = bytes(event.rx or b"")
            if len(report) > len(buff):
                raise _usb_error(errno.EOVERFLOW, f"{len(report)}-byte report, "
                                 f"{len(buff)}-byte buffer")
            buff[: len(report)] = array.array("B", report)
            self.reports_sent += 1
            self.last_report = report
            return len(report)

    def _next_event(self) -> tuple[ReportEvent | None, float]:
        with self._lock:
            if self.pace == "realtime":
                # A scale sends its current report when polled: reports the host was too slow
                # to collect are gone, only the newest overdue one is delivered (never an unplug
                # skipped).
                now_s = self._now()
                while (self._next + 1 < len(self.events)
                       and self.events[self._next].rx is not None
                       and self.events[self._next + 1].t + self._offset_s <= now_s):
                    self._next += 1
            if self._next < len(self.events):
                event = self.events[self._next]
                return event, event.t + self._offset_s
            if self.end == "hold" and self.last_report is not None:
                last = self.events[-1].t + self._offset_s if self.events else 0.0
                return ReportEvent(t=last + self.hold_interval_s, rx=self.last_report), (
                    last + self.hold_interval_s)
            if self.end == "loop" and self.events:
                return self.events[0], self.events[-1].t + self._offset_s + self.hold_interval_s
            return None, float("inf")

    def _advance(self) -> None:
        """Move past the event just delivered (caller holds the lock)."""
        if self._next < len(self.events):
            due = self.events[self._next].t + self._offset_s
            self._next += 1
        elif self.end == "hold":
            due = (self.events[-1].t if self.events else 0.0) + self._offset_s + (
                self.hold_interval_s)
            self._offset_s += self.hold_interval_s
        else:  # loop: restart the timeline one interval after the last event
            self._offset_s += self.events[-1].t + self.hold_interval_s - self.events[0].t
            self._next = 1
            due = self.events[0].t + self._offset_s
        if self.pace == "virtual":
            self._virtual_now_s = max(self._virtual_now_s, due)

    def _now(self) -> float:
        if self.pace == "virtual":
            return self._virtual_now_s
        opened = self._opened_at if self._opened_at is not None else time.monotonic()
        return time.monotonic() - opened

    def _wait(self, seconds: float, *, idle: bool = False) -> None:
        if self.pace == "virtual":
            if seconds != float("inf"):
                self._virtual_now_s += seconds
            if idle:
                # Nothing will ever come: pass a little real time so a reader polling through
                # timeouts does not spin a CPU.
                self._unplug_now.wait(min(seconds, _IDLE_REAL_WAIT_S))
            self._alive()
            return
        # A real wait that an unplug cuts short, as a pulled cable ends a pending transfer.
        self._unplug_now.wait(None if seconds == float("inf") else seconds)
        self._alive()

    def interrupt_write(self, handle: _Handle, ep: int, intf: int, data: bytes) -> int:
        with self._lock:
            self._handle_ok(handle)
            spec = self._endpoint(ep)
            if spec.bEndpointAddress & 0x80:
                raise _usb_error(errno.EPIPE, "write to an IN endpoint")
            if intf not in self.claimed:
                raise _usb_error(errno.EBUSY, f"interface {intf} is not claimed")
            self._accept_output_report(data)
            return len(data)

    def _accept_output_report(self, data: bytes) -> None:
        """Take a control (output) report as the device would, or stall like it."""
        if len(data) != 2 or data[0] != CONTROL_REPORT_ID:
            raise _usb_error(errno.EPIPE, f"device rejected output report {data.hex(' ')}")
        self.out_reports.append(bytes(data))
        self.history.append(f"output report {data.hex(' ')}")

    def control(self, handle: _Handle, request_type: int, request: int, value: int, index: int,
                data: array.array[int]) -> int:
        """A control transfer on endpoint 0; IN data is written into ``data``."""
        with self._lock:
            self._handle_ok(handle)
            is_in = bool(request_type & 0x80)
            self.control_log.append(ControlTransfer(
                request_type, request, value, index, b"" if is_in else data.tobytes(),
                len(data)))
            recipient = request_type & 0x1F
            if recipient == 1 and (request_type & 0x60) != 0x40:  # interface, not vendor
                self._interface_ok(index & 0xFF)
                if self.kernel_driver_attached[index & 0xFF] and index & 0xFF not in self.claimed:
                    raise _usb_error(errno.EBUSY, "the kernel driver holds the interface")
            reply = self._answer(request_type, request, value, index, data)
            if not is_in:
                return reply
            n = min(len(data), len(self._in_payload))
            data[:n] = array.array("B", self._in_payload[:n])
            return n

    def _answer(self, request_type: int, request: int, value: int, index: int,
                data: array.array[int]) -> int:
        kind, which = value >> 8, value & 0xFF
        if request_type == 0x80 and request == _GET_DESCRIPTOR:
            if kind == _DESC_DEVICE:
                self._in_payload = self.device_descriptor_bytes()
            elif kind == _DESC_CONFIG:
                self._in_payload = self.config_descriptor_bytes()
            elif kind == _DESC_STRING:
                self._in_payload = self.string_descriptor(which)
            else:
                raise _usb_error(errno.EPIPE, f"no descriptor type {kind}")
            return 0
        if request_type == 0x81 and request == _GET_DESCRIPTOR and kind == _DESC_HID_REPORT:
            self._in_payload = self._report_descriptor
            return 0
        if request_type == 0xA1 and request == _HID_GET_REPORT and kind == _REPORT_TYPE_INPUT:
            if self.last_report is None:
                raise _usb_error(errno.EPIPE, "no report yet")
            self._in_payload = self.last_report
            return 0
        if request_type == 0x21 and request == _HID_SET_REPORT and kind == _REPORT_TYPE_OUTPUT:
            payload = data.tobytes()
            if which != CONTROL_REPORT_ID:
                raise _usb_error(errno.EPIPE, f"no output report id {which}")
            self._accept_output_report(payload)
            return len(payload)
        if request_type == 0x21 and request == _HID_SET_IDLE:
            return 0
        raise _usb_error(errno.EPIPE, f"unsupported request 0x{request_type:02X}/0x{request:02X}")


# -- the pyusb backend --------------------------------------------------------------------------


class FakeBackend(usb.backend.IBackend):  # type: ignore[misc]  # pyusb is untyped
    """A ``usb.backend.IBackend`` over simulated devices; pass it to ``usb.core.find``."""

    def __init__(self, devices: FakeUsbDevice | Iterable[FakeUsbDevice]) -> None:
        super().__init__()
        self.devices: list[FakeUsbDevice] = (
            [devices] if isinstance(devices, FakeUsbDevice) else list(devices))

    @classmethod
    def from_fixture(cls, sequence_path: Path, *,
                     pace: Literal["virtual", "realtime"] = "virtual") -> FakeBackend:
        """A backend with the one device and report sequence of a fixture file."""
        definition, sequence = load_sequence(sequence_path)
        return cls(FakeUsbDevice(
            definition, sequence.events, end=sequence.end,
            hold_interval_s=sequence.hold_interval_s, pace=pace,
            kernel_driver_active=sequence.kernel_driver_active))

    @property
    def device(self) -> FakeUsbDevice:
        """The first (usually only) device."""
        return self.devices[0]

    # The IBackend interface (names and arguments as pyusb calls them).

    def enumerate_devices(self) -> list[FakeUsbDevice]:
        return [d for d in self.devices if not d.unplugged]

    def get_parent(self, dev: FakeUsbDevice) -> None:
        return None

    def get_device_descriptor(self, dev: FakeUsbDevice) -> _DeviceDescriptor:
        return dev.device_descriptor()

    def get_configuration_descriptor(self, dev: FakeUsbDevice, config: int) -> _ConfigDescriptor:
        if config != 0:
            raise IndexError(f"invalid configuration index {config}")
        return dev.config_descriptor()

    def get_interface_descriptor(self, dev: FakeUsbDevice, intf: int, alt: int,
                                 config: int) -> _InterfaceDescriptor:
        if config != 0 or intf != 0 or alt != 0:
            raise IndexError(f"invalid interface index {intf}/{alt}")
        return dev.interface_descriptor()

    def get_endpoint_descriptor(self, dev: FakeUsbDevice, ep: int, intf: int, alt: int,
                                config: int) -> _EndpointDescriptor:
        self.get_interface_descriptor(dev, intf, alt, config)
        if not 0 <= ep < len(dev.definition.interface.endpoints):
            raise IndexError(f"invalid endpoint index {ep}")
        return dev.endpoint_descriptor(ep)

    def open_device(self, dev: FakeUsbDevice) -> _Handle:
        return dev.open()

    def close_device(self, dev_handle: _Handle) -> None:
        dev_handle.device.close(dev_handle)

    def set_configuration(self, dev_handle: _Handle, config_value: int) -> None:
        dev_handle.device.set_configuration(dev_handle, config_value)

    def get_configuration(self, dev_handle: _Handle) -> int:
        return dev_handle.device.get_configuration(dev_handle)

    def set_interface_altsetting(self, dev_handle: _Handle, intf: int, altsetting: int) -> None:
        dev_handle.device._handle_ok(dev_handle)
        if altsetting != 0:
            raise _usb_error(errno.ENOENT, f"no alternate setting {altsetting}")

    def claim_interface(self, dev_handle: _Handle, intf: int) -> None:
        dev_handle.device.claim(dev_handle, intf)

    def release_interface(self, dev_handle: _Handle, intf: int) -> None:
        dev_handle.device.release(dev_handle, intf)

    def intr_read(self, dev_handle: _Handle, ep: int, intf: int, buff: array.array[int],
                  timeout: int) -> int:
        return dev_handle.device.interrupt_read(dev_handle, ep, intf, buff, timeout)

    def intr_write(self, dev_handle: _Handle, ep: int, intf: int, data: array.array[int],
                   timeout: int) -> int:
        return dev_handle.device.interrupt_write(dev_handle, ep, intf, data.tobytes())

    def ctrl_transfer(self, dev_handle: _Handle, bmRequestType: int, bRequest: int, wValue: int,
                      wIndex: int, data: array.array[int], timeout: int) -> int:
        return dev_handle.device.control(dev_handle, bmRequestType, bRequest, wValue, wIndex, data)

    def clear_halt(self, dev_handle: _Handle, ep: int) -> None:
        dev_handle.device._handle_ok(dev_handle)

    def reset_device(self, dev_handle: _Handle) -> None:
        dev_handle.device._handle_ok(dev_handle)

    def is_kernel_driver_active(self, dev_handle: _Handle, intf: int) -> bool:
        return dev_handle.device.is_kernel_driver_active(dev_handle, intf)

    def detach_kernel_driver(self, dev_handle: _Handle, intf: int) -> None:
        dev_handle.device.detach_kernel_driver(dev_handle, intf)

    def attach_kernel_driver(self, dev_handle: _Handle, intf: int) -> None:
        dev_handle.device.attach_kernel_driver(dev_handle, intf)


# -- a simulated scale from weights (simulator, demo) --------------------------------------------

SIM_VENDOR_ID: Final = 0x1209  # pid.codes, the open-source vendor id
SIM_PRODUCT_ID: Final = 0x0001  # pid.codes test PID: never ship hardware with it

# Report descriptor of the simulated scale: usage page 0x8D, control report 2 (zero scale,
# enforced zero return) and data report 3 (status, unit, exponent, weight) as in
# docs/protocols.md d. Item by item in docs/hid.md.
SCALE_REPORT_DESCRIPTOR: Final = bytes.fromhex(
    "05 8d 09 20 a1 01"
    " 85 02 09 31 a1 02 09 80 09 81 15 00 25 01 75 01 95 02 91 02 75 06 95 01 91 03 c0"
    " 85 03 09 32 a1 02 19 71 29 78 15 01 25 08 75 08 95 01 81 00"
    " 19 51 29 5c 15 01 25 0c 81 00 09 41 15 80 25 7f 81 02"
    " 09 40 15 00 27 ff ff 00 00 75 10 81 02 c0 c0")


def scale_device_definition(*, vid: int = SIM_VENDOR_ID, pid: int = SIM_PRODUCT_ID,
                            serial: str = "SIM-0001",
                            product: str = "heft simulated HID scale",
                            kernel_driver_active: bool = True) -> UsbDeviceDefinition:
    """A HID POS scale definition with one interrupt IN endpoint (zero via SET_REPORT)."""
    return UsbDeviceDefinition.model_validate({
        "format": DEVICE_FORMAT, "version": FORMAT_VERSION, "name": "heft-sim-scale",
        "device": {"idVendor": vid, "idProduct": pid, "manufacturer": "heft simulator",
                   "product": product, "serial_number": serial},
        "interface": {"report_descriptor": SCALE_REPORT_DESCRIPTOR,
                      "endpoints": [{"bEndpointAddress": 0x81, "wMaxPacketSize": 8}]},
        "kernel_driver_active": kernel_driver_active,
    })


def _status(status: str | int) -> ScaleStatus:
    if isinstance(status, int):
        return ScaleStatus(status)
    try:
        return STATUS_NAMES[status]
    except KeyError:
        raise ValueError(f"status {status!r}; expected one of {', '.join(STATUS_NAMES)} "
                         "or a code 1..8") from None


def weight_report(weight_g: float, status: str | int = "stable", *, unit: str = "g",
                  exponent: int = -1) -> bytes:
    """The data report a scale sends for ``weight_g`` shown in ``unit`` with ``exponent``.

    The report's weight is unsigned: a negative weight is sent as 0 with status under zero,
    one beyond 65535 steps as 65535 with status over weight.
    """
    scale_status = _status(status)
    steps = round(units.g_to_mass(weight_g, unit) / 10.0**exponent)
    if steps < 0:
        steps, scale_status = 0, ScaleStatus.UNDER_ZERO
    elif steps > 0xFFFF:
        steps, scale_status = 0xFFFF, ScaleStatus.OVER_WEIGHT
    return encode_data_report(scale_status, unit_code_for(unit), exponent, steps)


def fake_scale_backend_from_weights(
    samples: Iterable[tuple[float, float, str | int]],
    *,
    unit: str = "g",
    exponent: int = -1,
    vid: int = SIM_VENDOR_ID,
    pid: int = SIM_PRODUCT_ID,
    serial: str = "SIM-0001",
    end: EndMode = "hold",
    hold_interval_s: float = 0.2,
    pace: Literal["virtual", "realtime"] = "realtime",
    kernel_driver_active: bool = True,
) -> FakeBackend:
    """A backend with one simulated HID scale sending ``(t_s, weight_g, status)`` samples.

    ``status`` is a name (``stable``, ``motion``, ``zero``, ``under``, ``over``, ``fault``,
    ``needs_calibration``, ``needs_zero``) or a code 1..8. Open it through the real pyusb path:
    ``UsbHidTransport(vid, pid, backend=backend)``.
    """
    events = [ReportEvent(t=t_s, rx=weight_report(w_g, status, unit=unit, exponent=exponent))
              for t_s, w_g, status in samples]
    definition = scale_device_definition(vid=vid, pid=pid, serial=serial,
                                         kernel_driver_active=kernel_driver_active)
    return FakeBackend(FakeUsbDevice(definition, events, end=end,
                                     hold_interval_s=hold_interval_s, pace=pace))
