"""One simulated USB HID scale: what the host can do to it, answered as libusb on Linux does.

It ties together the fixture (``fixtures``), the descriptors (``descriptors``), the fault state
(``faults``) and the report timeline (``clock``), and records what the host did
(``history``, ``control_log``, ``out_reports``) so tests can assert it. Besides the faults of
``faults``: an interrupt read with nothing due within its timeout raises ``USBTimeoutError``; a
report longer than the read buffer raises EOVERFLOW; an unknown control request stalls (EPIPE).
"""

from __future__ import annotations

import array
import errno
import threading
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Final

from heft.drivers.fake_usb import descriptors
from heft.drivers.fake_usb.clock import Pace, ReportTimeline
from heft.drivers.fake_usb.faults import UsbFaults, timeout_error, usb_error
from heft.drivers.fake_usb.fixtures import EndMode, EndpointSpec, ReportEvent, UsbDeviceDefinition
from heft.drivers.fake_usb.reports import CONTROL_REPORT_ID, is_control_report

# USB standard (USB 2.0 table 9-4) and HID class (HID 1.11 section 7.2) requests the fake answers.
_GET_DESCRIPTOR: Final = 0x06
_HID_GET_REPORT: Final = 0x01
_HID_SET_REPORT: Final = 0x09
_HID_SET_IDLE: Final = 0x0A
_REPORT_TYPE_INPUT: Final = 1
_REPORT_TYPE_OUTPUT: Final = 2


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
        pace: Pace = "virtual",
        kernel_driver_active: bool | None = None,
    ) -> None:
        self.definition = definition
        self.history: list[str] = []
        self.control_log: list[ControlTransfer] = []
        self.out_reports: list[bytes] = []
        self.reports_sent = 0
        self.timeouts = 0
        self.last_report: bytes | None = None
        self.faults = UsbFaults(
            interface=definition.interface.bInterfaceNumber,
            kernel_driver_active=definition.kernel_driver_active if kernel_driver_active is None
            else kernel_driver_active,
            kernel_driver_on_replug=definition.kernel_driver_active,
            access_denied=definition.access_denied,
            configuration_value=definition.configuration.bConfigurationValue,
            history=self.history)
        self.timeline = ReportTimeline(events, end=end, hold_interval_s=hold_interval_s,
                                       pace=pace, unplug_now=self.faults.unplug_now)
        self._lock = threading.RLock()
        self._in_payload = b""  # the data stage of the IN control transfer being answered

    # State tests read, kept on the device as before the split.

    @property
    def events(self) -> tuple[ReportEvent, ...]:
        return self.timeline.events

    @property
    def pace(self) -> Pace:
        return self.timeline.pace

    @property
    def kernel_driver_attached(self) -> dict[int, bool]:
        return self.faults.kernel_driver_attached

    @property
    def claimed(self) -> set[int]:
        return self.faults.claimed

    @property
    def unplugged(self) -> bool:
        return self.faults.unplugged

    # -- fault injection --------------------------------------------------------------------

    def unplug(self) -> None:
        """Pull the cable now (from any thread): pending and later calls fail with ENODEV."""
        with self._lock:
            self.faults.unplug()

    def replug(self) -> None:
        """Plug the cable back in: the kernel driver binds again; the timeline goes on."""
        with self._lock:
            self.faults.replug()

    # -- host operations (called by FakeBackend) -------------------------------------------

    def open(self) -> _Handle:
        with self._lock:
            self.faults.check_open()
            self.timeline.start()
            self.history.append("open")
            return _Handle(self)

    def close(self, handle: _Handle) -> None:
        with self._lock:
            handle.open = False
            self.faults.closed()
            self.history.append("close")

    def handle_ok(self, handle: _Handle) -> None:
        """Raise as libusb does for a call on a closed handle or an unplugged device."""
        self.faults.handle_ok(handle.open)

    def is_kernel_driver_active(self, handle: _Handle, intf: int) -> bool:
        with self._lock:
            self.handle_ok(handle)
            self.faults.interface_ok(intf)
            return self.faults.kernel_driver_attached[intf]

    def detach_kernel_driver(self, handle: _Handle, intf: int) -> None:
        with self._lock:
            self.handle_ok(handle)
            self.faults.detach(intf)

    def attach_kernel_driver(self, handle: _Handle, intf: int) -> None:
        with self._lock:
            self.handle_ok(handle)
            self.faults.attach(intf)

    def claim(self, handle: _Handle, intf: int) -> None:
        with self._lock:
            self.handle_ok(handle)
            self.faults.claim(intf)

    def release(self, handle: _Handle, intf: int) -> None:
        with self._lock:
            self.handle_ok(handle)
            self.faults.release(intf)

    def set_configuration(self, handle: _Handle, value: int) -> None:
        with self._lock:
            self.handle_ok(handle)
            self.faults.set_configuration(value)

    def get_configuration(self, handle: _Handle) -> int:
        with self._lock:
            self.handle_ok(handle)
            return self.definition.configuration.bConfigurationValue

    def _endpoint(self, address: int) -> EndpointSpec:
        for ep in self.definition.interface.endpoints:
            if ep.bEndpointAddress == address:
                return ep
        raise usb_error(errno.ENOENT, f"no endpoint 0x{address:02X}")

    def interrupt_read(self, handle: _Handle, ep: int, intf: int, buff: array.array[int],
                       timeout_ms: int) -> int:
        """Deliver the next report due within ``timeout_ms`` or raise a timeout."""
        with self._lock:
            self.handle_ok(handle)
            self._endpoint(ep)
            self.faults.require_claimed(intf)
        timeout_s = timeout_ms / 1000.0 if timeout_ms > 0 else float("inf")
        with self._lock:
            event, due_s = self.timeline.next_event(self.last_report)
        now_s = self.timeline.now()
        if event is None or due_s > now_s + timeout_s:
            self.timeline.wait(timeout_s, idle=event is None)
            self.faults.alive()
            with self._lock:
                self.timeouts += 1
            raise timeout_error()
        if due_s > now_s:
            self.timeline.wait(due_s - now_s)
            self.faults.alive()
        with self._lock:
            self.handle_ok(handle)  # unplugged or closed while we waited
            self.timeline.advance()
            if event.unplug:
                self.faults.unplugged = True
                self.history.append("unplugged")
                raise usb_error(errno.ENODEV)
            report = bytes(event.rx or b"")
            if len(report) > len(buff):
                raise usb_error(errno.EOVERFLOW, f"{len(report)}-byte report, "
                                f"{len(buff)}-byte buffer")
            buff[: len(report)] = array.array("B", report)
            self.reports_sent += 1
            self.last_report = report
            return len(report)

    def interrupt_write(self, handle: _Handle, ep: int, intf: int, data: bytes) -> int:
        with self._lock:
            self.handle_ok(handle)
            spec = self._endpoint(ep)
            if spec.bEndpointAddress & 0x80:
                raise usb_error(errno.EPIPE, "write to an IN endpoint")
            self.faults.require_claimed(intf)
            self._accept_output_report(data)
            return len(data)

    def _accept_output_report(self, data: bytes) -> None:
        """Take a control (output) report as the device would, or stall like it."""
        if not is_control_report(data):
            raise usb_error(errno.EPIPE, f"device rejected output report {data.hex(' ')}")
        self.out_reports.append(bytes(data))
        self.history.append(f"output report {data.hex(' ')}")

    def control(self, handle: _Handle, request_type: int, request: int, value: int, index: int,
                data: array.array[int]) -> int:
        """A control transfer on endpoint 0; IN data is written into ``data``."""
        with self._lock:
            self.handle_ok(handle)
            is_in = bool(request_type & 0x80)
            self.control_log.append(ControlTransfer(
                request_type, request, value, index, b"" if is_in else data.tobytes(),
                len(data)))
            recipient = request_type & 0x1F
            if recipient == 1 and (request_type & 0x60) != 0x40:  # interface, not vendor
                self.faults.interface_request_ok(index & 0xFF)
            reply = self._answer(request_type, request, value, data)
            if not is_in:
                return reply
            n = min(len(data), len(self._in_payload))
            data[:n] = array.array("B", self._in_payload[:n])
            return n

    def _answer(self, request_type: int, request: int, value: int,
                data: array.array[int]) -> int:
        kind, which = value >> 8, value & 0xFF
        if request_type == 0x80 and request == _GET_DESCRIPTOR:
            if kind == descriptors.DESC_DEVICE:
                self._in_payload = descriptors.device_descriptor_bytes(self.definition)
            elif kind == descriptors.DESC_CONFIG:
                self._in_payload = descriptors.config_descriptor_bytes(self.definition)
            elif kind == descriptors.DESC_STRING:
                self._in_payload = descriptors.string_descriptor(self.definition, which)
            else:
                raise usb_error(errno.EPIPE, f"no descriptor type {kind}")
            return 0
        if (request_type == 0x81 and request == _GET_DESCRIPTOR
                and kind == descriptors.DESC_HID_REPORT):
            self._in_payload = bytes(self.definition.interface.report_descriptor)
            return 0
        if request_type == 0xA1 and request == _HID_GET_REPORT and kind == _REPORT_TYPE_INPUT:
            if self.last_report is None:
                raise usb_error(errno.EPIPE, "no report yet")
            self._in_payload = self.last_report
            return 0
        if request_type == 0x21 and request == _HID_SET_REPORT and kind == _REPORT_TYPE_OUTPUT:
            payload = data.tobytes()
            if which != CONTROL_REPORT_ID:
                raise usb_error(errno.EPIPE, f"no output report id {which}")
            self._accept_output_report(payload)
            return len(payload)
        if request_type == 0x21 and request == _HID_SET_IDLE:
            return 0
        raise usb_error(errno.EPIPE, f"unsupported request 0x{request_type:02X}/0x{request:02X}")
