"""``heft devices``: list serial ports and USB HID scales, with a config snippet for each.

Serial ports come from pyserial's ``comports(include_links=True)``; a stable
``/dev/serial/by-id/`` link is preferred in the snippet, because ``/dev/ttyUSB0`` numbers change
when adapters are plugged in another order. HID scales come from ``drivers.usb_transport``
(pyusb); when USB cannot be listed (no libusb, no permission) the serial list still prints, with
a note saying why USB was skipped.
"""

from __future__ import annotations

import argparse
import json
import os
import sys
from collections.abc import Iterable
from dataclasses import asdict, dataclass, field
from typing import Any

from heft.drivers.registry import DRIVERS

BY_ID_DIR = "/serial/by-id/"  # udev's stable names: /dev/serial/by-id/usb-...
# USB vendors whose boards usually run our beam firmware (MicroPython on RP2040 / ESP32-S2/S3).
_BOARD_VENDORS = {0x2E8A: "Raspberry Pi (RP2040)", 0x303A: "Espressif (ESP32)"}


@dataclass(frozen=True, slots=True)
class SerialPortSummary:
    device: str
    by_id: str | None
    links: list[str]
    vid: int | None
    pid: int | None
    serial_number: str | None
    description: str
    manufacturer: str | None
    suggested_driver: str
    note: str = ""

    @property
    def vid_pid(self) -> str:
        return "" if self.vid is None or self.pid is None else f"{self.vid:04x}:{self.pid:04x}"

    @property
    def port(self) -> str:
        """What to put in the configuration: the by-id link when there is one."""
        return self.by_id or self.device


@dataclass(frozen=True, slots=True)
class HidScaleSummary:
    url: str
    vid_pid: str
    serial_number: str
    description: str
    confirmed: bool
    note: str = ""


@dataclass(slots=True)
class Inventory:
    serial: list[SerialPortSummary] = field(default_factory=list)
    hid: list[HidScaleSummary] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)


def summarise_ports(ports: Iterable[Any]) -> list[SerialPortSummary]:
    """Group pyserial ``ListPortInfo`` entries: links are attached to the port they point to."""
    entries = list(ports)
    real: dict[str, Any] = {}
    links: dict[str, list[str]] = {}
    for p in entries:
        target = os.path.realpath(p.device)
        if target != p.device:
            links.setdefault(target, []).append(p.device)
        else:
            real[p.device] = p
    for target in links:  # a link whose target pyserial did not list on its own
        if target not in real:
            real[target] = next(p for p in entries if os.path.realpath(p.device) == target)
    out: list[SerialPortSummary] = []
    for device in sorted(real):
        p = real[device]
        own = sorted(links.get(device, []))
        by_id = next((ln for ln in own if BY_ID_DIR in ln), None)
        board = _BOARD_VENDORS.get(p.vid) if p.vid is not None else None
        note = f"{board} board: likely a heft beam" if board else (
            "" if p.vid is not None else "no USB information (built-in or virtual port)")
        out.append(SerialPortSummary(
            device=device, by_id=by_id, links=own, vid=p.vid, pid=p.pid,
            serial_number=p.serial_number,
            description="" if p.description in (None, "n/a") else p.description,
            manufacturer=p.manufacturer, suggested_driver="beam" if board else "poll_balance",
            note=note))
    return out


def list_serial() -> list[SerialPortSummary]:
    from serial.tools import list_ports

    return summarise_ports(list_ports.comports(include_links=True))


def list_hid(backend: Any = None) -> tuple[list[HidScaleSummary], list[str]]:
    """HID scales via drivers.usb_transport; notes explain anything that could not be listed."""
    try:
        from heft.drivers import usb_transport
    except ImportError as err:
        return [], [f"USB HID scales not listed: {err}"]
    try:
        found = usb_transport.list_hid_scales(backend)
    except Exception as err:  # no libusb, permissions, odd hubs: never fatal for a listing
        return [], [f"USB HID scales not listed: {err}"]
    return [
        HidScaleSummary(url=s.port, vid_pid=f"{s.vid:04x}:{s.pid:04x}",
                        serial_number=s.serial_number,
                        description=" ".join(x for x in (s.manufacturer, s.product) if x),
                        confirmed=s.confirmed, note=s.note)
        for s in found
    ], []


def serial_snippet(port: SerialPortSummary, index: int) -> str:
    choices = ", ".join(n for n in DRIVERS if n != "hid_pos")
    baud = 115200 if port.suggested_driver == "beam" else 9600
    return "\n".join([
        "[[devices]]",
        f'name = "{"beam" if port.suggested_driver == "beam" else "scale"}-{index}"',
        f'driver = "{port.suggested_driver}"  # one of: {choices}',
        f"port = {json.dumps(port.port)}",
        f"baudrate = {baud}  # as set on the device",
    ])


def hid_snippet(scale: HidScaleSummary, index: int) -> str:
    return "\n".join([
        "[[devices]]",
        f'name = "hid-scale-{index}"',
        'driver = "hid_pos"',
        f"url = {json.dumps(scale.url)}",
    ])


def render_text(inv: Inventory) -> str:
    lines: list[str] = []
    lines.append(f"Serial ports ({len(inv.serial)}):")
    if not inv.serial:
        lines.append("  none found")
    for i, p in enumerate(inv.serial, start=1):
        lines.append(f"  {p.device}")
        if p.by_id:
            lines.append(f"    by-id:       {p.by_id}")
        if p.vid_pid:
            lines.append(f"    VID:PID:     {p.vid_pid}")
        if p.serial_number:
            lines.append(f"    serial:      {p.serial_number}")
        lines.append(f"    description: {p.description or '-'}")
        if p.note:
            lines.append(f"    note:        {p.note}")
        lines.append("    config:")
        lines.extend("      " + ln for ln in serial_snippet(p, i).splitlines())
    lines.append("")
    lines.append(f"USB HID scales ({len(inv.hid)}):")
    if not inv.hid and not inv.notes:
        lines.append("  none found")
    for i, s in enumerate(inv.hid, start=1):
        lines.append(f"  {s.url}")
        lines.append(f"    VID:PID:     {s.vid_pid}")
        if s.serial_number:
            lines.append(f"    serial:      {s.serial_number}")
        lines.append(f"    description: {s.description or '-'}")
        if not s.confirmed or s.note:
            lines.append(f"    note:        {s.note or 'not confirmed as a scale'}")
        lines.append("    config:")
        lines.extend("      " + ln for ln in hid_snippet(s, i).splitlines())
    lines.extend(f"  {n}" for n in inv.notes)
    return "\n".join(lines)


def to_json(inv: Inventory) -> str:
    serial = [
        {**asdict(p), "vid_pid": p.vid_pid, "port": p.port, "config": serial_snippet(p, i)}
        for i, p in enumerate(inv.serial, start=1)
    ]
    hid = [{**asdict(s), "config": hid_snippet(s, i)} for i, s in enumerate(inv.hid, start=1)]
    return json.dumps({"serial": serial, "hid": hid, "notes": inv.notes}, indent=2)


def gather(*, usb: bool = True, usb_backend: Any = None) -> Inventory:
    inv = Inventory(serial=list_serial())
    if usb:
        inv.hid, inv.notes = list_hid(usb_backend)
    return inv


def run(args: argparse.Namespace) -> int:
    inv = gather(usb=not args.no_usb)
    sys.stdout.write((to_json(inv) if args.json else render_text(inv)) + "\n")
    return 0


def register(subparsers: Any) -> None:
    parser = subparsers.add_parser(
        "devices",
        help="list serial ports and USB HID scales, with a config snippet for each",
        description="List serial ports (device, /dev/serial/by-id link, VID:PID, serial number, "
        "description) and USB HID scales, each with a [[devices]] snippet for the station "
        "config. The driver in a serial snippet is a guess: set the one your device speaks.",
    )
    parser.add_argument("--json", action="store_true", help="machine-readable output")
    parser.add_argument("--no-usb", action="store_true", help="skip the USB HID scan")
    parser.set_defaults(func=run)
