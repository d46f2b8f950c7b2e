"""Discovery of USB HID scales for ``heft devices``: HID interfaces declaring usage page 0x8D.

``list_hid_scales`` lists HID interfaces whose report descriptor declares usage page 0x8D
(Scales). The report descriptor is read from Linux sysfs when possible (no permissions needed,
nothing detached), else by a control request when no kernel driver holds the interface.
``report_layout`` parses a report descriptor with the hid-parser library.
"""

from __future__ import annotations

import contextlib
import warnings
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Final

import hid_parser
import usb.core
import usb.util

from heft.drivers.base import TransportError
from heft.drivers.usb_backend import (
    HID_CLASS,
    SCALES_USAGE_PAGE,
    USB_HID_SCHEME,
    backend_for,
    string_descriptor,
)

_HID_BOOT_SUBCLASS: Final = 1  # keyboards and mice; never a scale
_GET_DESCRIPTOR: Final = 0x06
_HID_REPORT_DESCRIPTOR: Final = 0x22


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
        devices = list(usb.core.find(find_all=True, backend=backend_for(backend)))
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
                serial_number=string_descriptor(dev, dev.iSerialNumber),
                manufacturer=string_descriptor(dev, dev.iManufacturer),
                product=string_descriptor(dev, dev.iProduct),
                bus=dev.bus, address=dev.address, interface=number, confirmed=confirmed,
                note=note))
            with contextlib.suppress(usb.core.USBError):
                usb.util.dispose_resources(dev)
    return found
