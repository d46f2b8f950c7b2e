"""``heft devices``: serial ports through pyserial, HID scales through pyusb (fake backend)."""

from __future__ import annotations

import json
import os
import tomllib
from pathlib import Path

import pytest
from serial.tools.list_ports_common import ListPortInfo

from heft.daemon.config import DeviceConfig
from heft.drivers.fake_usb import FakeBackend, FakeUsbDevice, scale_device_definition
from heft.drivers.registry import get_driver_class
from heft.tui.cli import main
from heft.tui.commands import devices


def port_info(device: str, vid: int | None = None, pid: int | None = None,
              serial: str | None = None, description: str = "n/a") -> ListPortInfo:
    info = ListPortInfo(device, skip_link_detection=True)
    info.vid, info.pid, info.serial_number, info.description = vid, pid, serial, description
    return info


def test_links_attach_to_their_port_and_by_id_is_preferred(tmp_path: Path) -> None:
    tty = tmp_path / "ttyUSB3"
    tty.write_text("")
    by_id = tmp_path / "serial" / "by-id"
    by_id.mkdir(parents=True)
    link = by_id / "usb-Larkspur_Beam_E8DB84-if00"
    link.symlink_to(tty)
    other = tmp_path / "heft-beam"
    other.symlink_to(tty)
    ports = [port_info(str(tty), 0x2E8A, 0x0005, "E8DB84", "Board in FS mode"),
             port_info(str(link), 0x2E8A, 0x0005, "E8DB84", "Board in FS mode"),
             port_info(str(other), 0x2E8A, 0x0005, "E8DB84", "Board in FS mode"),
             port_info("/dev/ttyS0")]
    summary = devices.summarise_ports(ports)
    assert [s.device for s in summary] == ["/dev/ttyS0", str(tty)]
    beam = summary[1]
    assert (beam.by_id, beam.port) == (str(link), str(link))
    assert beam.links == sorted([str(link), str(other)])
    assert (beam.vid_pid, beam.serial_number, beam.suggested_driver) == (
        "2e8a:0005", "E8DB84", "beam")
    assert summary[0].description == "" and "no USB information" in summary[0].note


@pytest.mark.parametrize(("vid", "driver"), [(0x2E8A, "beam"), (0x0403, "poll_balance")])
def test_serial_snippet_is_a_valid_device_config(vid: int, driver: str) -> None:
    (port,) = devices.summarise_ports([port_info("/dev/ttyUSB0", vid, 0x6001, "A1")])
    table = tomllib.loads(devices.serial_snippet(port, 1))["devices"][0]
    config = DeviceConfig.model_validate(table)
    assert config.driver == driver and config.address == "/dev/ttyUSB0"
    assert get_driver_class(config.driver).name == driver


@pytest.mark.parametrize(("kernel_bound", "confirmed"), [(False, True), (True, False)])
def test_hid_scales_listed_through_pyusb(kernel_bound: bool, confirmed: bool) -> None:
    dev = FakeUsbDevice(scale_device_definition(serial="LC-QC1", kernel_driver_active=kernel_bound),
                        [])
    hid, notes = devices.list_hid(FakeBackend(dev))
    assert notes == []
    (scale,) = hid
    assert scale.url.endswith("?serial=LC-QC1") and scale.url.startswith("usb-hid://")
    assert scale.confirmed is confirmed
    table = tomllib.loads(devices.hid_snippet(scale, 1))["devices"][0]
    config = DeviceConfig.model_validate(table)
    assert (config.driver, config.address) == ("hid_pos", scale.url)


def test_usb_failure_is_a_note_not_a_crash() -> None:
    class Broken:
        def enumerate_devices(self) -> object:
            raise OSError("libusb unavailable")

    hid, notes = devices.list_hid(Broken())
    assert hid == [] and len(notes) == 1 and "not listed" in notes[0]


def test_cli_json_lists_this_machines_ports(capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["devices", "--json", "--no-usb"]) == 0
    data = json.loads(capsys.readouterr().out)
    from serial.tools import list_ports

    real = {os.path.realpath(p.device) for p in list_ports.comports(include_links=True)}
    assert {p["device"] for p in data["serial"]} == real
    for p in data["serial"]:
        DeviceConfig.model_validate(tomllib.loads(p["config"])["devices"][0])


def test_cli_text_output(capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["devices", "--no-usb"]) == 0
    out = capsys.readouterr().out
    assert out.startswith("Serial ports (") and "USB HID scales (0):" in out
