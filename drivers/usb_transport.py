"""USB HID scales through pyusb: the ``usb-hid://VID:PID[?serial=...]`` transport and discovery.

``UsbHidTransport`` finds the device, detaches the kernel's HID driver if it holds the interface
(and re-attaches it on close), claims the interface and reads whole input reports from its
interrupt IN endpoint in worker threads, so the asyncio loop never blocks. ``write`` sends an
output report: through the interrupt OUT endpoint when the interface has one, else as a HID
SET_REPORT control request (the usual way for scales). A read timeout is not an error (a scale
may only report on change); a USB error is, and comes out as ``TransportError`` with the pyusb
error chained, so the service's supervisor reconnects.

``list_hid_scales`` lists HID interfaces whose report descriptor declares usage page 0x8D
(Scales), for ``heft devices``. The report descriptor is read from Linux sysfs when possible
(no permissions needed, nothing detached), else by a control request when no kernel driver
holds the interface.

The pyusb backend is libusb 1.0 from the ``libusb-package`` wheel unless one is passed in; tests
and the bench simulator pass ``drivers.fake_usb.FakeBackend``.
"""

from __future__ import annotations

import asyncio
import contextlib
import errno
import logging
import warnings
from collections.abc import Mapping
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Final
from urllib.parse import parse_qs, urlsplit

import hid_parser
import usb.core
import usb.util
from pydantic import BaseModel, ConfigDict, Field, ValidationError

from heft.drivers.base import DriverConfigError, TransportError
from heft.drivers.validation import problem_lines

__all__ = [
    "SCALES_USAGE_PAGE",
    "ReportLayout",
    "UsbDeviceSummary",
    "UsbHidTransport",
    "list_hid_scales",
    "open_usb_transport",
    "parse_usb_hid_url",
    "report_layout",
    "set_default_backend",
]

log = logging.getLogger("heft.usb")

USB_HID_SCHEME: Final = "usb-hid://"
SCALES_USAGE_PAGE: Final = 0x8D
HID_CLASS: Final = 0x03
_HID_BOOT_SUBCLASS: Final = 1  # keyboards and mice; never a scale
_SET_REPORT_REQUEST_TYPE: Final = 0x21  # host to device, class, interface
_SET_REPORT: Final = 0x09
_REPORT_TYPE_OUTPUT: Final = 0x02
_GET_DESCRIPTOR: Final = 0x06
_HID_REPORT_DESCRIPTOR: Final = 0x22
_DISCONNECT_ERRNOS: Final = frozenset({errno.ENODEV, errno.EIO, errno.EPIPE, errno.ESHUTDOWN,
                                       errno.ENOENT})

_default_backend: Any = None


def set_default_backend(backend: Any) -> None:
    """Use ``backend`` for every transport and listing not given one (None: libusb again).

    For the bench simulator and demos, which drive a simulated scale through a configuration
    that only names ``usb-hid://VID:PID``.
    """
    global _default_backend
    _default_backend = backend


def _backend(explicit: Any) -> Any:
    if explicit is not None:
        return explicit
    if _default_backend is not None:
        return _default_backend
    import libusb_package  # imported late: loading libusb is not free and tests never need it

    backend = libusb_package.get_libusb1_backend()
    if backend is None:
        raise TransportError("libusb 1.0 could not be loaded (libusb-package wheel); USB HID "
                             "scales cannot be read on this machine")
    return backend


def _describe_usb_error(err: usb.core.USBError) -> str:
    code = err.errno
    if code == errno.EACCES:
        return (f"{err} - no permission to open the device; install the udev rule described "
                "in docs/hid.md, then unplug and replug the scale")
    if code == errno.EBUSY:
        return f"{err} - another program (or the kernel) holds the scale's interface"
    if code in _DISCONNECT_ERRNOS:
        return f"{err} - the device was disconnected"
    return str(err)


def _is_timeout(err: usb.core.USBError) -> bool:
    return isinstance(err, usb.core.USBTimeoutError) or err.errno == errno.ETIMEDOUT


def _string(dev: usb.core.Device, index: int) -> str:
    """A string descriptor, or '' when the device cannot be asked (permissions, gone)."""
    if not index:
        return ""
    try:
        return str(usb.util.get_string(dev, index) or "")
    except (usb.core.USBError, ValueError, NotImplementedError):
        return ""


class UsbHidTransport:
    """A USB HID device read report by report (implements ``drivers.transport.Transport``).

    Args:
        vid: USB vendor id.
        pid: USB product id.
        serial: Serial number string to pick one of several identical scales.
        backend: A pyusb backend; default libusb 1.0 (or ``set_default_backend``).
        interface: The HID interface number; default the first HID interface.
        read_timeout_ms: How long one blocking read waits (bounds how long ``close`` waits).
        write_timeout_ms: Timeout of one output report.
    """

    def __init__(self, vid: int, pid: int, serial: str | None = None, backend: Any = None, *,
                 interface: int | None = None, read_timeout_ms: int = 250,
                 write_timeout_ms: int = 1000) -> None:
        self.vid = vid
        self.pid = pid
        self.serial = serial
        self.interface = interface
        self.read_timeout_ms = read_timeout_ms
        self.write_timeout_ms = write_timeout_ms
        self.description = f"{USB_HID_SCHEME}{vid:04x}:{pid:04x}" + (
            f"?serial={serial}" if serial else "")
        self.kernel_driver_detached = False
        self._backend_arg = backend
        self._dev: Any = None
        self._intf_number = 0
        self._ep_in = 0
        self._ep_out: int | None = None
        self._report_size = 64
        self._executor: ThreadPoolExecutor | None = None
        self._pending: asyncio.Future[bytes | None] | None = None
        self._failure: TransportError | None = None

    # -- open ---------------------------------------------------------------------------------

    async def open(self) -> None:
        if self._dev is not None:
            return
        self._failure = None
        # Two workers: one may sit in a blocking read while the other sends a zero command.
        self._executor = ThreadPoolExecutor(max_workers=2, thread_name_prefix="heft-usb")
        loop = asyncio.get_running_loop()
        try:
            await loop.run_in_executor(self._executor, self._open_blocking)
        except BaseException:
            self._executor.shutdown(wait=False)
            self._executor = None
            raise

    def _find(self) -> Any:
        backend = _backend(self._backend_arg)
        try:
            found = list(usb.core.find(find_all=True, backend=backend, idVendor=self.vid,
                                       idProduct=self.pid))
        except (usb.core.USBError, usb.core.NoBackendError) as err:
            raise TransportError(f"{self.description}: cannot list USB devices: {err}") from err
        if self.serial is not None:
            matching = [d for d in found if _string(d, d.iSerialNumber) == self.serial]
            for other in found:  # reading the serial opened them; give them back
                if other not in matching:
                    with contextlib.suppress(usb.core.USBError):
                        usb.util.dispose_resources(other)
            found = matching
        if not found:
            raise TransportError(
                f"{self.description}: no such USB device is connected (`heft devices` lists "
                "the HID scales found)")
        return found[0]

    def _open_blocking(self) -> None:
        dev = self._find()
        try:
            self._claim(dev)
        except usb.core.USBError as err:
            self._release(dev)
            raise TransportError(f"cannot open {self.description}: "
                                 f"{_describe_usb_error(err)}") from err
        except TransportError:
            self._release(dev)
            raise
        self._dev = dev
        out = "zero via SET_REPORT" if self._ep_out is None else f"OUT 0x{self._ep_out:02X}"
        log.info("opened %s (interface %d, IN 0x%02X, %s)", self.description, self._intf_number,
                 self._ep_in, out)

    def _claim(self, dev: Any) -> None:
        cfg = dev[0]  # HID scales have one configuration
        intf = usb.util.find_descriptor(
            cfg, custom_match=lambda i: i.bInterfaceClass == HID_CLASS and (
                self.interface is None or i.bInterfaceNumber == self.interface))
        if intf is None:
            which = "a HID interface" if self.interface is None else (
                f"HID interface {self.interface}")
            raise TransportError(f"{self.description}: the device has no {which}")
        self._intf_number = intf.bInterfaceNumber
        try:
            attached = bool(dev.is_kernel_driver_active(self._intf_number))
        except NotImplementedError:  # not on this OS: nothing to detach
            attached = False
        if attached:
            dev.detach_kernel_driver(self._intf_number)
            self.kernel_driver_detached = True
        try:
            dev.get_active_configuration()
        except usb.core.USBError:
            dev.set_configuration()
        usb.util.claim_interface(dev, self._intf_number)
        ep_in = usb.util.find_descriptor(intf, custom_match=lambda e: (
            usb.util.endpoint_direction(e.bEndpointAddress) == usb.util.ENDPOINT_IN
            and usb.util.endpoint_type(e.bmAttributes) == usb.util.ENDPOINT_TYPE_INTR))
        if ep_in is None:
            raise TransportError(f"{self.description}: the HID interface has no interrupt IN "
                                 "endpoint")
        ep_out = usb.util.find_descriptor(intf, custom_match=lambda e: (
            usb.util.endpoint_direction(e.bEndpointAddress) == usb.util.ENDPOINT_OUT
            and usb.util.endpoint_type(e.bmAttributes) == usb.util.ENDPOINT_TYPE_INTR))
        self._ep_in = ep_in.bEndpointAddress
        self._ep_out = None if ep_out is None else ep_out.bEndpointAddress
        self._report_size = int(ep_in.wMaxPacketSize)

    def _release(self, dev: Any) -> None:
        """Give the interface back and re-attach the kernel driver; never raises."""
        with contextlib.suppress(usb.core.USBError):
            usb.util.release_interface(dev, self._intf_number)
        if self.kernel_driver_detached:
            try:
                dev.attach_kernel_driver(self._intf_number)
                self.kernel_driver_detached = False
            except (usb.core.USBError, NotImplementedError) as err:
                log.info("%s: kernel driver not re-attached: %s", self.description, err)
        with contextlib.suppress(usb.core.USBError):
            usb.util.dispose_resources(dev)

    # -- read / write -------------------------------------------------------------------------

    def _lost(self, err: usb.core.USBError, doing: str) -> TransportError:
        failure = TransportError(f"{self.description}: {doing} failed: "
                                 f"{_describe_usb_error(err)}")
        failure.__cause__ = err
        return failure

    def _read_blocking(self) -> bytes | None:
        dev = self._dev
        if dev is None:
            raise TransportError(f"{self.description} is closed")
        try:
            data = dev.read(self._ep_in, self._report_size, timeout=self.read_timeout_ms)
        except usb.core.USBError as err:
            if _is_timeout(err):
                return None
            raise self._lost(err, "read") from err
        return bytes(data)

    async def read(self) -> bytes:
        """The next input report (whole, report id first). Waits through read timeouts."""
        loop = asyncio.get_running_loop()
        while True:
            if self._failure is not None:
                raise self._failure
            if self._dev is None or self._executor is None:
                raise TransportError(f"{self.description} is not open")
            if self._pending is None:
                self._pending = loop.run_in_executor(self._executor, self._read_blocking)
            pending = self._pending
            try:
                # Shielded: a cancelled read leaves the transfer to finish; the next read
                # picks up its report instead of losing it.
                report = await asyncio.shield(pending)
            except TransportError as err:
                self._pending = None
                self._failure = err
                raise
            self._pending = None
            if report:
                return report

    def _write_blocking(self, data: bytes) -> None:
        dev = self._dev
        if dev is None:
            raise TransportError(f"{self.description} is closed")
        try:
            if self._ep_out is not None:
                dev.write(self._ep_out, data, timeout=self.write_timeout_ms)
            else:
                dev.ctrl_transfer(_SET_REPORT_REQUEST_TYPE, _SET_REPORT,
                                  (_REPORT_TYPE_OUTPUT << 8) | data[0], self._intf_number, data,
                                  timeout=self.write_timeout_ms)
        except usb.core.USBError as err:
            raise self._lost(err, f"output report {data.hex(' ')}") from err

    async def write(self, data: bytes) -> None:
        """Send one output report, report id first (e.g. ``HidPosDriver.command('zero')``)."""
        if not data:
            raise ValueError("an output report needs at least its report id byte")
        if self._failure is not None:
            raise self._failure
        if self._dev is None or self._executor is None:
            raise TransportError(f"{self.description} is not open")
        loop = asyncio.get_running_loop()
        await loop.run_in_executor(self._executor, self._write_blocking, bytes(data))

    # -- close --------------------------------------------------------------------------------

    async def close(self) -> None:
        """Release the interface, re-attach the kernel driver, free the device. Idempotent."""
        dev, executor, pending = self._dev, self._executor, self._pending
        self._dev = None
        self._executor = None
        self._pending = None
        if self._failure is None:
            self._failure = TransportError(f"{self.description} is closed")
        if executor is None:
            return
        if pending is not None:
            # A read in flight ends by itself within one read timeout.
            await asyncio.wait([pending], timeout=self.read_timeout_ms / 1000.0 + 2.0)
            if pending.done() and not pending.cancelled():
                pending.exception()  # retrieved: a read failing during close is expected
        if dev is not None:
            await asyncio.get_running_loop().run_in_executor(executor, self._release, dev)
        executor.shutdown(wait=False)


# -- configuration ------------------------------------------------------------------------------


class _UsbOptions(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True, arbitrary_types_allowed=True)

    serial: str | None = None
    interface: int | None = Field(default=None, ge=0, le=255)
    read_timeout_ms: int = Field(default=250, ge=10, le=10_000)
    write_timeout_ms: int = Field(default=1000, ge=10, le=10_000)
    backend: Any = None


def parse_usb_hid_url(port: str) -> tuple[int, int, dict[str, str]]:
    """Split ``usb-hid://VID:PID[?serial=...&interface=N]`` into (vid, pid, query).

    Raises:
        DriverConfigError: naming the port and the expected form.
    """
    expected = "expected usb-hid://VID:PID with 4-digit hex ids, e.g. usb-hid://1209:0001"
    parts = urlsplit(port)
    if parts.scheme != "usb-hid" or parts.path not in ("", "/"):
        raise DriverConfigError(f"port {port!r}: {expected}")
    vid_text, _, pid_text = parts.netloc.partition(":")
    try:
        vid, pid = int(vid_text, 16), int(pid_text, 16)
    except ValueError:
        raise DriverConfigError(f"port {port!r}: {expected}") from None
    if not (0 <= vid <= 0xFFFF and 0 <= pid <= 0xFFFF):
        raise DriverConfigError(f"port {port!r}: {expected}")
    query: dict[str, str] = {}
    for key, values in parse_qs(parts.query, keep_blank_values=True).items():
        query[key] = values[-1]
    return vid, pid, query


def open_usb_transport(port: str, options: Mapping[str, Any] | None = None) -> UsbHidTransport:
    """Build (not open) the transport for a ``usb-hid://`` port string and device options.

    Options (from the URL query or the device's options): ``serial``, ``interface``,
    ``read_timeout_ms``, ``write_timeout_ms``; ``backend`` (a pyusb backend object) for tests.
    """
    vid, pid, query = parse_usb_hid_url(port)
    try:
        opts = _UsbOptions.model_validate({**query, **dict(options or {})})
    except ValidationError as err:
        detail = "; ".join(problem_lines(err, _UsbOptions, noun="option", top="(options)"))
        raise DriverConfigError(f"port {port!r}: {detail}") from None
    return UsbHidTransport(vid, pid, opts.serial, opts.backend, interface=opts.interface,
                           read_timeout_ms=opts.read_timeout_ms,
                           write_timeout_ms=opts.write_timeout_ms)


# -- discovery ----------------------------------------------------------------------------------


@dataclass(frozen=True, slots=True)
class ReportLayout:
    """What a HID report descriptor declares: usage pages and report sizes in bytes.

    Sizes include the report id byte when the descriptor numbers its reports.
    """

    usage_pages: frozenset[int]
    input_report_bytes: dict[int | None, int] = field(default_factory=dict)
    output_report_bytes: dict[int | None, int] = field(default_factory=dict)


def _item_pages(items: list[Any]) -> set[int]:
    pages: set[int] = set()
    for item in items:
        if isinstance(item, hid_parser.VariableItem):
            pages.add(int(item.usage.page))
        elif isinstance(item, hid_parser.ArrayItem):
            pages.update(int(u.page) for u in item.usages)
    return pages


def report_layout(descriptor: bytes) -> ReportLayout:
    """Parse a HID report descriptor (with the hid-parser library).

    Raises:
        ValueError: when the descriptor cannot be parsed.
    """
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")  # compliance nits of real devices are not our call
            rdesc = hid_parser.ReportDescriptor(list(descriptor))
            pages: set[int] = set()
            inputs: dict[int | None, int] = {}
            outputs: dict[int | None, int] = {}
            for rid in rdesc.input_report_ids:
                pages |= _item_pages(rdesc.get_input_items(rid))
                inputs[rid] = int(rdesc.get_input_report_size(rid).byte) + (rid is not None)
            for rid in rdesc.output_report_ids:
                pages |= _item_pages(rdesc.get_output_items(rid))
                outputs[rid] = int(rdesc.get_output_report_size(rid).byte) + (rid is not None)
    except Exception as err:  # the library raises several types on malformed input
        raise ValueError(f"unparseable HID report descriptor: {err}") from err
    return ReportLayout(frozenset(pages), inputs, outputs)


@dataclass(frozen=True, slots=True)
class UsbDeviceSummary:
    """One HID scale (or possible scale) found on the USB bus, for ``heft devices``."""

    vid: int
    pid: int
    serial_number: str
    manufacturer: str
    product: str
    bus: int | None
    address: int | None
    interface: int
    confirmed: bool
    """True when the report descriptor was read and declares usage page 0x8D (Scales)."""
    note: str = ""

    @property
    def port(self) -> str:
        """The port string for the configuration (serial included when the device has one)."""
        base = f"{USB_HID_SCHEME}{self.vid:04x}:{self.pid:04x}"
        return f"{base}?serial={self.serial_number}" if self.serial_number else base


def _sysfs_report_descriptor(
    dev: Any, cfg_value: int, intf: int, sysfs_root: Path
) -> bytes | None:
    ports = getattr(dev, "port_numbers", None)
    if dev.bus is None or not ports:
        return None
    name = f"{dev.bus}-{'.'.join(str(p) for p in ports)}:{cfg_value}.{intf}"
    for path in sorted((sysfs_root / "bus" / "usb" / "devices" / name).glob("*/report_descriptor")):
        with contextlib.suppress(OSError):
            return path.read_bytes()
    return None


def _usb_report_descriptor(dev: Any, intf: int) -> bytes | None:
    """Ask the device itself, only when no kernel driver holds the interface."""
    try:
        if dev.is_kernel_driver_active(intf):
            return None
        data = dev.ctrl_transfer(0x81, _GET_DESCRIPTOR, _HID_REPORT_DESCRIPTOR << 8, intf, 4096)
        return bytes(data)
    except (usb.core.USBError, NotImplementedError):
        return None
    finally:
        with contextlib.suppress(usb.core.USBError):
            usb.util.dispose_resources(dev)


def list_hid_scales(
    backend: Any = None, *, sysfs_root: Path = Path("/sys")
) -> list[UsbDeviceSummary]:
    """HID interfaces on the bus that are (or may be) POS scales, for ``heft devices``.

    Devices whose report descriptor was read and lacks usage page 0x8D are left out; those whose
    descriptor could not be read are listed with ``confirmed=False`` and a note saying why.
    """
    try:
        devices = list(usb.core.find(find_all=True, backend=_backend(backend)))
    except (usb.core.USBError, usb.core.NoBackendError) as err:
        raise TransportError(f"cannot list USB devices: {err}") from err
    found: list[UsbDeviceSummary] = []
    for dev in devices:
        try:
            cfg = dev[0]
        except (usb.core.USBError, IndexError):
            continue
        for intf in cfg:
            if intf.bInterfaceClass != HID_CLASS or intf.bInterfaceSubClass == _HID_BOOT_SUBCLASS:
                continue
            number = intf.bInterfaceNumber
            descriptor = _sysfs_report_descriptor(dev, cfg.bConfigurationValue, number,
                                                  sysfs_root)
            if descriptor is None:
                descriptor = _usb_report_descriptor(dev, number)
            confirmed, note = False, "report descriptor not readable (kernel driver bound)"
            if descriptor is not None:
                try:
                    layout = report_layout(descriptor)
                except ValueError as err:
                    layout, note = None, str(err)
                if layout is not None:
                    if SCALES_USAGE_PAGE not in layout.usage_pages:
                        continue
                    confirmed, note = True, ""
                    if layout.input_report_bytes.get(3) != 6:
                        note = "data report layout differs from docs/protocols.md d"
            found.append(UsbDeviceSummary(
                vid=dev.idVendor, pid=dev.idProduct,
                serial_number=_string(dev, dev.iSerialNumber),
                manufacturer=_string(dev, dev.iManufacturer), product=_string(dev, dev.iProduct),
                bus=dev.bus, address=dev.address, interface=number, confirmed=confirmed,
                note=note))
            with contextlib.suppress(usb.core.USBError):
                usb.util.dispose_resources(dev)
    return found
