"""USB HID POS scales end to end: pyusb's real ``usb.core`` API over the fake backend.

``heft.drivers.fake_usb.FakeBackend`` stands below pyusb (no scale can be plugged into CI); the
transport, the hid_pos driver and the session run as with a real scale. Expected readings come
from the fixtures' hand-written ``expect`` fields (hardware_fixtures/usb/README.md).
"""

from __future__ import annotations

import asyncio
import contextlib
import errno
import json
import time
from collections.abc import AsyncGenerator
from pathlib import Path

import pytest
import usb.core
import usb.util

from heft.drivers.base import DriverConfigError, TransportError
from heft.drivers.fake_usb import (
    FakeBackend,
    FakeUsbDevice,
    fake_scale_backend_from_weights,
    load_device_definition,
    load_sequence,
    scale_device_definition,
)
from heft.drivers.protocols.hid_pos import HidPosDriver
from heft.drivers.reading import Flag, Reading
from heft.drivers.session import DeviceSession
from heft.drivers.transport import open_transport
from heft.drivers.usb_transport import (
    UsbHidTransport,
    list_hid_scales,
    parse_usb_hid_url,
)
from tests.test_drivers_hid_pos import (
    DEVICE_FILE,
    FIXTURES,
    PID,
    SEQUENCES,
    SERIAL,
    VID,
    check_reading,
    expected_of,
    read_all,
    sequence_backend,
)

# -- end to end through pyusb ------------------------------------------------------------------


def test_pyusb_sees_the_fake_as_a_real_device() -> None:
    backend = sequence_backend("settle_grams")
    dev = usb.core.find(backend=backend, idVendor=VID, idProduct=PID)
    assert isinstance(dev, usb.core.Device)
    assert dev.serial_number == SERIAL
    assert dev.product == "PS-5 postal scale (heft fixture)"
    intf = dev[0][(0, 0)]
    assert intf.bInterfaceClass == 3
    # Like libusb on Linux: the kernel's HID driver holds the interface until detached.
    with pytest.raises(usb.core.USBError) as busy:
        usb.util.claim_interface(dev, 0)
    assert busy.value.errno == errno.EBUSY
    usb.util.dispose_resources(dev)


@pytest.mark.parametrize("path", SEQUENCES, ids=[p.stem for p in SEQUENCES])
async def test_end_to_end_each_sequence(path: Path) -> None:
    definition, sequence = load_sequence(path)
    backend = FakeBackend(FakeUsbDevice(definition, sequence.events, end=sequence.end))
    transport = UsbHidTransport(VID, PID, SERIAL, backend)
    driver = HidPosDriver("bench-1-scale")
    reports = sum(1 for e in sequence.events if e.rx is not None and e.expect is not None)
    await transport.open()
    try:
        readings = await read_all(transport, driver, reports)
        if any(e.unplug for e in sequence.events):
            with pytest.raises(TransportError, match="disconnected"):
                await asyncio.wait_for(transport.read(), 10)
    finally:
        await transport.close()
    expected = [e for e in expected_of(sequence.events) if e != "frame_error"]
    assert len(readings) == len(expected)
    for reading, expect in zip(readings, expected, strict=True):
        check_reading(reading, expect)
    assert driver.stats.frame_errors == sum(
        1 for e in expected_of(sequence.events) if e == "frame_error")


async def test_kernel_driver_detached_then_reattached() -> None:
    backend = sequence_backend("settle_grams")
    fake = backend.device
    transport = UsbHidTransport(VID, PID, backend=backend)
    await transport.open()
    assert fake.kernel_driver_attached == {0: False}
    assert transport.kernel_driver_detached
    await transport.read()
    await transport.close()
    await transport.close()  # idempotent
    assert fake.kernel_driver_attached == {0: True}
    steps = [h for h in fake.history if h.split()[0] in {"detach", "claim", "release", "attach"}]
    assert steps == ["detach 0", "claim 0", "release 0", "attach 0"]
    with pytest.raises(TransportError, match="closed"):
        await transport.read()


async def test_no_kernel_driver_means_nothing_detached_or_attached() -> None:
    backend = sequence_backend("settle_grams", kernel_driver_active=False)
    transport = UsbHidTransport(VID, PID, backend=backend)
    await transport.open()
    await transport.read()
    await transport.close()
    assert not any(h.startswith(("detach", "attach")) for h in backend.device.history)


async def test_zero_command_arrives_as_set_report() -> None:
    backend = sequence_backend("needs_rezero")
    driver = HidPosDriver("bench-1-scale")
    transport = UsbHidTransport(VID, PID, backend=backend)
    await transport.open()
    try:
        [first] = await read_all(transport, driver, 1)
        assert first.flags == Flag.NEEDS_ZERO
        await transport.write(driver.command("zero"))
    finally:
        await transport.close()
    fake = backend.device
    assert fake.out_reports == [b"\x02\x01"]
    set_reports = [c for c in fake.control_log if (c.bmRequestType, c.bRequest) == (0x21, 0x09)]
    assert len(set_reports) == 1
    # SET_REPORT: wValue = report type Output (2) << 8 | report id 2; wIndex = interface 0.
    assert (set_reports[0].wValue, set_reports[0].wIndex, set_reports[0].data) == (
        0x0202, 0, b"\x02\x01")


async def test_zero_command_uses_interrupt_out_when_the_device_has_one() -> None:
    data = json.loads(DEVICE_FILE.read_text())
    data["interface"]["endpoints"].append(
        {"bEndpointAddress": "0x02", "bmAttributes": 3, "wMaxPacketSize": 8, "bInterval": 10})
    definition = load_device_definition(DEVICE_FILE).model_validate(data)
    _, sequence = load_sequence(FIXTURES / "sequences" / "needs_rezero.json")
    backend = FakeBackend(FakeUsbDevice(definition, sequence.events))
    transport = UsbHidTransport(VID, PID, backend=backend)
    await transport.open()
    try:
        await transport.write(HidPosDriver("s").command("zero"))
    finally:
        await transport.close()
    assert backend.device.out_reports == [b"\x02\x01"]
    assert not [c for c in backend.device.control_log if c.bRequest == 0x09]


async def test_a_report_the_device_rejects_is_a_transport_error() -> None:
    backend = sequence_backend("settle_grams")
    transport = UsbHidTransport(VID, PID, backend=backend)
    await transport.open()
    try:
        with pytest.raises(TransportError, match="output report 05 01"):
            await transport.write(b"\x05\x01")
    finally:
        await transport.close()


async def test_unplug_during_a_pending_read_raises_promptly() -> None:
    # Real time: the scale is quiet, a read is waiting, then the cable is pulled.
    backend = fake_scale_backend_from_weights([(0.0, 0.0, "zero")], end="silent",
                                              pace="realtime")
    transport = UsbHidTransport(0x1209, 0x0001, backend=backend, read_timeout_ms=5000)
    await transport.open()
    await transport.read()
    loop = asyncio.get_running_loop()
    loop.call_later(0.1, backend.device.unplug)
    started = time.monotonic()
    with pytest.raises(TransportError) as lost:
        await asyncio.wait_for(transport.read(), 10)
    elapsed = time.monotonic() - started
    await transport.close()
    assert elapsed < 4.0  # well inside the 5 s read timeout: the pending transfer ended
    cause = lost.value.__cause__
    assert isinstance(cause, usb.core.USBError) and cause.errno == errno.ENODEV
    assert list_hid_scales(backend) == []  # an unplugged device leaves the enumeration


async def test_silence_is_not_an_error() -> None:
    backend = sequence_backend("silent_gaps")
    transport = UsbHidTransport(VID, PID, backend=backend, read_timeout_ms=250)
    driver = HidPosDriver("s")
    await transport.open()
    try:
        readings = await read_all(transport, driver, 3)
    finally:
        await transport.close()
    assert [r.value for r in readings] == pytest.approx([0.0, 390.6, 0.0])
    # 2 s then 3 s of silence at 250 ms per read: at least 7 + 11 timeouts went by.
    assert backend.device.timeouts >= 18


async def test_open_errors_name_the_device_and_the_remedy() -> None:
    missing = UsbHidTransport(VID, 0x0002, backend=sequence_backend("settle_grams"))
    with pytest.raises(TransportError, match=r"usb-hid://1209:0002: no such USB device"):
        await missing.open()
    wrong_serial = UsbHidTransport(VID, PID, "NOPE", backend=sequence_backend("settle_grams"))
    with pytest.raises(TransportError, match="no such USB device"):
        await wrong_serial.open()
    data = json.loads(DEVICE_FILE.read_text())
    data["access_denied"] = True
    definition = load_device_definition(DEVICE_FILE).model_validate(data)
    denied = UsbHidTransport(VID, PID, backend=FakeBackend(FakeUsbDevice(definition, [])))
    with pytest.raises(TransportError, match="udev rule"):
        await denied.open()


async def test_session_reads_through_open_transport_and_sends_zero() -> None:
    backend = sequence_backend("settle_grams")
    transport = open_transport(f"usb-hid://1209:0001?serial={SERIAL}", {"backend": backend})
    session = DeviceSession("bench-1-scale", HidPosDriver("bench-1-scale"), transport)
    values: list[float] = []
    outputs = session.outputs()
    assert isinstance(outputs, AsyncGenerator)  # closed explicitly: its finally closes the port
    async with asyncio.timeout(10), contextlib.aclosing(outputs):
        async for out in outputs:
            assert isinstance(out, Reading)
            values.append(out.value)
            if len(values) == 3:
                await session.send_command("zero")
            if len(values) == 8:
                break
    assert values == pytest.approx([0.0, 0.0, 287.5, 315.0, 309.8, 310.2, 310.2, 310.0])
    assert backend.device.out_reports == [b"\x02\x01"]
    assert backend.device.kernel_driver_attached == {0: True}


def test_port_strings_and_options_are_checked() -> None:
    assert parse_usb_hid_url("usb-hid://1209:0001?serial=A1") == (0x1209, 1, {"serial": "A1"})
    for bad in ("usb-hid://1209", "usb-hid://xyz:0001", "usb-hid://12345:0001"):
        with pytest.raises(DriverConfigError, match="expected usb-hid://VID:PID"):
            parse_usb_hid_url(bad)
    with pytest.raises(DriverConfigError, match="read_timeout"):
        open_transport("usb-hid://1209:0001", {"read_timeout": 5})
    transport = open_transport("usb-hid://1209:0001?serial=A1&interface=0", {})
    assert isinstance(transport, UsbHidTransport)
    assert (transport.serial, transport.interface) == ("A1", 0)


# -- discovery -----------------------------------------------------------------------------------


def test_list_hid_scales_confirms_through_sysfs(tmp_path: Path) -> None:
    backend = sequence_backend("settle_grams")
    [unconfirmed] = list_hid_scales(backend, sysfs_root=tmp_path)
    assert not unconfirmed.confirmed and "not readable" in unconfirmed.note
    # Linux exposes each HID interface's report descriptor, readable without permissions.
    hid_dir = tmp_path / "bus/usb/devices/3-1.4:1.0/0003:1209:0001.0007"
    hid_dir.mkdir(parents=True)
    (hid_dir / "report_descriptor").write_bytes(
        load_device_definition(DEVICE_FILE).interface.report_descriptor)
    [scale] = list_hid_scales(backend, sysfs_root=tmp_path)
    assert scale.confirmed and scale.note == ""
    assert scale.port == f"usb-hid://1209:0001?serial={SERIAL}"
    assert (scale.manufacturer, scale.bus, scale.interface) == (
        "Fernbrake Instruments (heft fixture)", 3, 0)
    assert backend.device.kernel_driver_attached == {0: True}  # listing detaches nothing


def test_list_hid_scales_reads_the_descriptor_when_no_driver_holds_it(tmp_path: Path) -> None:
    scale = FakeUsbDevice(scale_device_definition(serial="S1", kernel_driver_active=False), [])
    mouse_like = scale_device_definition(pid=0x0002, serial="M1", kernel_driver_active=False)
    # A generic-desktop (mouse) report descriptor on a non-boot HID interface: not a scale.
    mouse_rdesc = bytes.fromhex("05 01 09 02 a1 01 09 01 a1 00 05 09 19 01 29 03 15 00 25 01"
                                " 95 03 75 01 81 02 95 01 75 05 81 03 c0 c0")
    mouse_like = mouse_like.model_copy(update={"interface": mouse_like.interface.model_copy(
        update={"report_descriptor": mouse_rdesc})})
    found = list_hid_scales(FakeBackend([scale, FakeUsbDevice(mouse_like, [])]),
                            sysfs_root=tmp_path)
    assert [(s.serial_number, s.confirmed) for s in found] == [("S1", True)]
