"""USB HID scales through pyusb: the ``usb-hid://VID:PID[?serial=...]`` transport.

``UsbHidTransport`` finds the device, detaches the kernel's HID driver if it holds the interface
(and re-attaches it on close), claims the interface and reads whole input reports from its
interrupt IN endpoint in worker threads, so the asyncio loop never blocks. ``write`` sends an
output report: through the interrupt OUT endpoint when the interface has one, else as a HID
SET_REPORT control request (the usual way for scales). A read timeout is not an error (a scale
may only report on change); a USB error is, and comes out as ``TransportError`` with the pyusb
error chained, so the service's supervisor reconnects.

Discovery (``list_hid_scales``, ``report_layout``) lives in ``usb_discovery`` and the backend
choice (``set_default_backend``) in ``usb_backend``; both are importable from here too. The
pyusb backend is libusb 1.0 from the ``libusb-package`` wheel unless one is passed in; tests and
the bench simulator pass ``heft.drivers.fake_usb.FakeBackend``.
"""

from __future__ import annotations

import asyncio
import contextlib
import errno
import logging
from collections.abc import Mapping
from concurrent.futures import ThreadPoolExecutor
from typing import Any, Final
from urllib.parse import parse_qs, urlsplit

import usb.core
import usb.util
from pydantic import BaseModel, ConfigDict, Field, ValidationError

from heft.drivers.base import DriverConfigError, TransportError
from heft.drivers.usb_backend import (
    HID_CLASS,
    SCALES_USAGE_PAGE,
    USB_HID_SCHEME,
    backend_for,
    set_default_backend,
    string_descriptor,
)
from heft.drivers.usb_discovery import (
    ReportLayout,
    UsbDeviceSummary,
    list_hid_scales,
    report_layout,
)
from heft.drivers.validation import problem_lines

__all__ = [
    "HID_CLASS",
    "SCALES_USAGE_PAGE",
    "USB_HID_SCHEME",
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

_SET_REPORT_REQUEST_TYPE: Final = 0x21  # host to device, class, interface
_SET_REPORT: Final = 0x09
_REPORT_TYPE_OUTPUT: Final = 0x02
_DISCONNECT_ERRNOS: Final = frozenset({errno.ENODEV, errno.EIO, errno.EPIPE, errno.ESHUTDOWN,
                                       errno.ENOENT})


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
        backend = backend_for(self._backend_arg)
        try:
            found = list(usb.core.find(find_all=True, backend=backend, idVendor=self.vid,
                                       idProduct=self.pid))
        except (usb.core.USBError, usb.core.NoBackendError) as err:
            raise TransportError(f"{self.description}: cannot list USB devices: {err}") from err
        if self.serial is not None:
            matching = [d for d in found if string_descriptor(d, d.iSerialNumber) == self.serial]
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
