"""USB HID POS scales: the hid_pos driver, the pyusb transport and the fake pyusb backend.

End-to-end tests go through pyusb's real ``usb.core`` API with ``drivers.fake_usb.FakeBackend``
below it (no scale can be plugged into CI). Expected readings come from the fixtures' hand-written
``expect`` fields; unit definitions checked here are exact by definition (international pound
and yard agreement 1959: 1 lb = 453.59237 g, 1 oz = 1/16 lb; 1 grain = 64.79891 mg; troy ounce =
480 grains; pennyweight = 24 grains; metric carat = 200 mg; NIST Handbook 44 appendix C).
Unit and status codes are those of the HID Usage Tables, Scales page 0x8D (usages 0x51..0x5C
and 0x71..0x78), as listed in docs/protocols.md d.
"""

from __future__ import annotations

import asyncio
import contextlib
import errno
import json
import time
from collections.abc import AsyncGenerator
from pathlib import Path
from typing import Any

import hid_parser
import pytest
import usb.core
import usb.util
from hypothesis import given, settings
from hypothesis import strategies as st

from heft.drivers.base import DriverConfigError, TransportError, UnsupportedCommand
from heft.drivers.fake_usb import (
    SCALE_REPORT_DESCRIPTOR,
    FakeBackend,
    FakeUsbDevice,
    FixtureError,
    ReportEvent,
    fake_scale_backend_from_weights,
    load_device_definition,
    load_sequence,
    scale_device_definition,
)
from heft.drivers.protocols.hid_pos import UNIT_CODES, HidPosDriver
from heft.drivers.reading import Flag, Reading
from heft.drivers.registry import create_driver
from heft.drivers.session import DeviceSession
from heft.drivers.transport import open_transport
from heft.drivers.usb_transport import (
    UsbHidTransport,
    list_hid_scales,
    parse_usb_hid_url,
    report_layout,
    set_default_backend,
)

FIXTURES = Path(__file__).resolve().parent.parent / "hardware_fixtures" / "usb"
SEQUENCES = sorted((FIXTURES / "sequences").glob("*.json"))
DEVICE_FILE = FIXTURES / "devices" / "fernbrake-ps5.json"
VID, PID, SERIAL = 0x1209, 0x0001, "FB-PS5-0042"

GRAMS_PER_OUNCE = 453.59237 / 16  # international avoirdupois ounce, exact (1959)
GRAMS_PER_GRAIN = 0.06479891  # exact (1959)


def _expected(events: tuple[ReportEvent, ...]) -> list[Any]:
    return [e.expect for e in events if e.rx is not None and e.expect is not None]


def _check(reading: Reading, expect: dict[str, Any]) -> None:
    assert reading.value == pytest.approx(expect["g"], rel=1e-12, abs=1e-12)
    assert reading.device_unit == expect["unit"]
    flags = Flag.NONE
    for name in expect["flags"]:
        flags |= Flag[name]
    assert reading.flags == flags
    assert reading.usable == expect.get("usable", True)


async def _read_all(transport: UsbHidTransport, driver: HidPosDriver, reports: int,
                    ) -> list[Reading]:
    readings: list[Reading] = []
    for _ in range(reports):
        data = await asyncio.wait_for(transport.read(), 10)
        readings.extend(o for o in driver.feed(data, time.monotonic()) if isinstance(o, Reading))
    return readings


# -- the fixtures themselves -------------------------------------------------------------------


def test_every_sequence_loads_and_names_an_existing_device() -> None:
    assert len(SEQUENCES) >= 9
    for path in SEQUENCES:
        definition, sequence = load_sequence(path)
        assert definition.name == sequence.device
        assert sequence.events


@pytest.mark.parametrize("descriptor", [
    load_device_definition(DEVICE_FILE).interface.report_descriptor, SCALE_REPORT_DESCRIPTOR,
], ids=["fixture", "simulator"])
def test_report_descriptor_declares_the_contract_layout(descriptor: bytes) -> None:
    # Parsed by the hid-parser library, not by heft: usage page 0x8D, a 6-byte data report 3
    # (id, status, unit, exponent, 16-bit weight) and a 2-byte control report 2.
    layout = report_layout(descriptor)
    assert layout.usage_pages == {0x8D}
    assert layout.input_report_bytes == {3: 6}
    assert layout.output_report_bytes == {2: 2}
    rdesc = hid_parser.ReportDescriptor(list(descriptor))
    status, unit, exponent, weight = rdesc.get_input_items(3)
    assert [u.usage for u in status.usages] == list(range(0x71, 0x79))
    assert [u.usage for u in unit.usages] == list(range(0x51, 0x5D))
    assert (exponent.usage.usage, exponent.logical_min, exponent.logical_max) == (0x41, -128, 127)
    assert (weight.usage.usage, int(weight.size)) == (0x40, 16)


def test_fixture_version_mismatch_is_named(tmp_path: Path) -> None:
    data = json.loads(DEVICE_FILE.read_text())
    data["version"] = 2
    bad = tmp_path / "v2.json"
    bad.write_text(json.dumps(data))
    with pytest.raises(FixtureError, match=r"version 2 is not supported.*version 1"):
        load_device_definition(bad)


def test_fixture_event_needs_report_or_unplug(tmp_path: Path) -> None:
    (tmp_path / "devices").mkdir()
    (tmp_path / "devices" / "fernbrake-ps5.json").write_text(DEVICE_FILE.read_text())
    (tmp_path / "sequences").mkdir()
    seq = tmp_path / "sequences" / "bad.json"
    seq.write_text(json.dumps({"format": "heft-usb-sequence", "version": 1,
                               "device": "fernbrake-ps5", "events": [{"t": 0.0}]}))
    with pytest.raises(FixtureError, match=r"events\[0\]: .*exactly one of 'rx'"):
        load_sequence(seq)


# -- the driver on its own ---------------------------------------------------------------------


@pytest.mark.parametrize("path", SEQUENCES, ids=[p.stem for p in SEQUENCES])
def test_driver_decodes_each_sequence_to_the_expected_readings(path: Path) -> None:
    _, sequence = load_sequence(path)
    driver = HidPosDriver("bench-1-scale")
    expected = _expected(sequence.events)
    outputs: list[list[Any]] = []
    for i, event in enumerate(sequence.events):
        if event.rx is not None and event.expect is not None:
            outputs.append(driver.feed(event.rx, float(i)))
    assert len(outputs) == len(expected)
    for out, expect in zip(outputs, expected, strict=True):
        if expect == "frame_error":
            assert out == []
        else:
            assert len(out) == 1
            assert isinstance(out[0], Reading)
            _check(out[0], expect)
    errors = sum(1 for e in expected if e == "frame_error")
    assert driver.stats.frame_errors == errors
    assert driver.stats.readings == len(expected) - errors


@pytest.mark.parametrize(("report", "grams"), [
    ("03 04 01 00 e8 03", 1.0),  # 1000 mg
    ("03 04 03 fd 86 01", 0.390 * 1000),  # 390 * 10^-3 kg
    ("03 04 04 fe f4 01", 5.00 * 0.2),  # 5.00 ct, metric carat = 200 mg
    ("03 04 06 00 0f 00", 15 * GRAMS_PER_GRAIN),  # 15 grains
    ("03 04 07 00 14 00", 20 * 24 * GRAMS_PER_GRAIN),  # 20 dwt = one troy ounce
    ("03 04 08 fd 01 00", 1000.0),  # 0.001 metric ton
    ("03 04 0a fe 64 00", 480 * GRAMS_PER_GRAIN),  # 1.00 troy ounce = 480 grains
    ("03 04 0b fe 60 05", 13.76 * GRAMS_PER_OUNCE),
    ("03 04 0c fe 56 00", 0.86 * 453.59237),
])
def test_unit_codes_convert_to_grams(report: str, grams: float) -> None:
    [reading] = HidPosDriver("s").feed(bytes.fromhex(report), 0.0)
    assert isinstance(reading, Reading)
    assert reading.value == pytest.approx(grams, rel=1e-12)


def test_ambiguous_units_are_refused_with_a_reason() -> None:
    driver = HidPosDriver("s")
    assert driver.feed(bytes.fromhex("03 04 09 00 01 00"), 0.0) == []  # avoirdupois ton
    assert "ton" in driver.stats.last_error
    assert driver.feed(bytes.fromhex("03 04 05 00 01 00"), 0.0) == []
    assert "tael" in driver.stats.last_error
    assert driver.stats.frame_errors == 2
    assert set(UNIT_CODES) == {1, 2, 3, 4, 6, 7, 8, 10, 11, 12}


def test_extreme_exponents_do_not_raise() -> None:
    driver = HidPosDriver("s")
    [tiny] = driver.feed(bytes.fromhex("03 04 02 80 ff ff"), 0.0)
    [huge] = driver.feed(bytes.fromhex("03 04 02 7f ff ff"), 0.0)
    assert isinstance(tiny, Reading) and isinstance(huge, Reading)
    assert tiny.value == pytest.approx(65535e-128)
    assert huge.value == pytest.approx(65535e127)


def test_zero_command_is_the_control_report_and_tare_is_unsupported() -> None:
    driver = create_driver("hid_pos", "qc-1-scale")
    assert isinstance(driver, HidPosDriver)
    assert driver.command("zero") == b"\x02\x01"
    with pytest.raises(UnsupportedCommand, match="tare"):
        driver.command("tare")


@settings(max_examples=400, deadline=None)
@given(st.binary(min_size=0, max_size=16))
def test_fuzz_random_reports_never_raise(report: bytes) -> None:
    driver = HidPosDriver("fuzz")
    out = driver.feed(report, 0.0)
    valid = (len(report) == 6 and report[0] == 3 and 1 <= report[1] <= 8
             and report[2] in UNIT_CODES)
    assert len(out) == (1 if valid else 0)
    assert driver.stats.frame_errors == (0 if valid else 1)


@settings(max_examples=300, deadline=None)
@given(st.integers(0, 5), st.integers(0, 255), st.booleans())
def test_fuzz_mutated_reports_never_become_wrong_readings(pos: int, value: int,
                                                          truncate: bool) -> None:
    good = bytearray.fromhex("03 04 02 ff 1e 0c")
    good[pos] = value
    report = bytes(good[:pos] if truncate else good)
    out = HidPosDriver("fuzz").feed(report, 0.0)
    if out:
        [reading] = out
        assert isinstance(reading, Reading)
        assert reading.raw == report and len(report) == 6 and report[0] == 3


# -- end to end through pyusb ------------------------------------------------------------------


def _backend(name: str, **device_kw: Any) -> FakeBackend:
    definition, sequence = load_sequence(FIXTURES / "sequences" / f"{name}.json")
    return FakeBackend(FakeUsbDevice(definition, sequence.events, end=sequence.end,
                                     **device_kw))


def test_pyusb_sees_the_fake_as_a_real_device() -> None:
    backend = _backend("settle_grams")
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
        readings = await _read_all(transport, driver, reports)
        if any(e.unplug for e in sequence.events):
            with pytest.raises(TransportError, match="disconnected"):
                await asyncio.wait_for(transport.read(), 10)
    finally:
        await transport.close()
    expected = [e for e in _expected(sequence.events) if e != "frame_error"]
    assert len(readings) == len(expected)
    for reading, expect in zip(readings, expected, strict=True):
        _check(reading, expect)
    assert driver.stats.frame_errors == sum(
        1 for e in _expected(sequence.events) if e == "frame_error")


async def test_kernel_driver_detached_then_reattached() -> None:
    backend = _backend("settle_grams")
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
    backend = _backend("settle_grams", kernel_driver_active=False)
    transport = UsbHidTransport(VID, PID, backend=backend)
    await transport.open()
    await transport.read()
    await transport.close()
    assert not any(h.startswith(("detach", "attach")) for h in backend.device.history)


async def test_zero_command_arrives_as_set_report() -> None:
    backend = _backend("needs_rezero")
    driver = HidPosDriver("bench-1-scale")
    transport = UsbHidTransport(VID, PID, backend=backend)
    await transport.open()
    try:
        [first] = await _read_all(transport, driver, 1)
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
    backend = _backend("settle_grams")
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
    backend = _backend("silent_gaps")
    transport = UsbHidTransport(VID, PID, backend=backend, read_timeout_ms=250)
    driver = HidPosDriver("s")
    await transport.open()
    try:
        readings = await _read_all(transport, driver, 3)
    finally:
        await transport.close()
    assert [r.value for r in readings] == pytest.approx([0.0, 390.6, 0.0])
    # 2 s then 3 s of silence at 250 ms per read: at least 7 + 11 timeouts went by.
    assert backend.device.timeouts >= 18


async def test_open_errors_name_the_device_and_the_remedy() -> None:
    missing = UsbHidTransport(VID, 0x0002, backend=_backend("settle_grams"))
    with pytest.raises(TransportError, match=r"usb-hid://1209:0002: no such USB device"):
        await missing.open()
    wrong_serial = UsbHidTransport(VID, PID, "NOPE", backend=_backend("settle_grams"))
    with pytest.raises(TransportError, match="no such USB device"):
        await wrong_serial.open()
    data = json.loads(DEVICE_FILE.read_text())
    data["access_denied"] = True
    definition = load_device_definition(DEVICE_FILE).model_validate(data)
    denied = UsbHidTransport(VID, PID, backend=FakeBackend(FakeUsbDevice(definition, [])))
    with pytest.raises(TransportError, match="udev rule"):
        await denied.open()


async def test_session_reads_through_open_transport_and_sends_zero() -> None:
    backend = _backend("settle_grams")
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
    backend = _backend("settle_grams")
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


# -- the simulated scale builder ---------------------------------------------------------------


async def test_simulated_scale_from_weights_through_pyusb() -> None:
    samples: list[tuple[float, float, str | int]] = [
        (0.0, 0.0, "zero"), (0.1, 180.26, "motion"), (0.2, 402.04, "stable"),
        (0.3, -3.0, "stable"), (0.4, 7000.0, "stable"), (0.5, 402.04, 4)]
    backend = fake_scale_backend_from_weights(samples, pace="virtual", end="hold",
                                              vid=0x1209, pid=0x0001)
    transport = UsbHidTransport(0x1209, 0x0001, backend=backend)
    driver = HidPosDriver("sim")
    await transport.open()
    try:
        readings = await _read_all(transport, driver, 8)  # 6 samples, then the hold repeats
    finally:
        await transport.close()
    assert [r.value for r in readings] == pytest.approx(
        [0.0, 180.3, 402.0, 0.0, 6553.5, 402.0, 402.0, 402.0])
    assert [r.flags for r in readings[:5]] == [
        Flag.STABLE | Flag.AT_ZERO, Flag.MOTION, Flag.STABLE, Flag.UNDERLOAD, Flag.OVERLOAD]


async def test_simulated_scale_in_ounces_real_time() -> None:
    backend = fake_scale_backend_from_weights(
        [(0.0, 390.0894382, "stable"), (0.5, 0.0, "zero")], unit="oz", exponent=-2,
        pace="realtime", end="silent")
    transport = UsbHidTransport(0x1209, 0x0001, backend=backend, read_timeout_ms=100)
    driver = HidPosDriver("sim")
    await transport.open()
    try:
        first, second = await _read_all(transport, driver, 2)
    finally:
        await transport.close()
    assert first.device_unit == "oz"
    assert first.value == pytest.approx(13.76 * GRAMS_PER_OUNCE)
    assert second.flags == Flag.STABLE | Flag.AT_ZERO


def test_simulated_scale_rejects_bad_input() -> None:
    with pytest.raises(ValueError, match="status 'wobbly'"):
        fake_scale_backend_from_weights([(0.0, 1.0, "wobbly")])
    with pytest.raises(ValueError, match="unit 'stone'"):
        fake_scale_backend_from_weights([(0.0, 1.0, "stable")], unit="stone")


async def test_simulated_scale_loops_and_reaches_the_default_backend() -> None:
    backend = fake_scale_backend_from_weights(
        [(0.0, 100.0, "stable"), (0.1, 200.0, "stable")], pace="virtual", end="loop")
    set_default_backend(backend)
    try:
        transport = open_transport("usb-hid://1209:0001", {})
        await transport.open()
        try:
            values = [HidPosDriver("s").feed(await transport.read(), 0.0)[0] for _ in range(5)]
        finally:
            await transport.close()
    finally:
        set_default_backend(None)
    assert [v.value for v in values if isinstance(v, Reading)] == pytest.approx(
        [100.0, 200.0, 100.0, 200.0, 100.0])


async def test_real_time_host_that_reads_late_gets_only_the_newest_report() -> None:
    # Like an interrupt endpoint: the scale answers a poll with its current report.
    samples: list[tuple[float, float, str | int]] = [
        (0.0, 10.0, "motion"), (0.01, 20.0, "motion"), (0.02, 30.0, "stable")]
    backend = fake_scale_backend_from_weights(samples, pace="realtime", end="silent")
    transport = UsbHidTransport(0x1209, 0x0001, backend=backend, read_timeout_ms=100)
    await transport.open()
    try:
        await asyncio.sleep(0.3)
        [reading] = await _read_all(transport, HidPosDriver("s"), 1)
    finally:
        await transport.close()
    assert reading.value == pytest.approx(30.0)
    assert backend.device.reports_sent == 1


async def test_a_hid_session_records_and_replays_in_the_heft_recording_format(
    tmp_path: Path,
) -> None:
    # One interrupt transfer = one chunk, so a replay feeds the driver the same whole reports.
    from heft.drivers.recording import (
        RecordingHeader,
        RecordingTransport,
        RecordingWriter,
        read_recording,
        replay_outputs,
    )

    path = tmp_path / "hid.jsonl"
    header = RecordingHeader(device="bench-1-scale", driver="hid_pos", binary=True)
    live_driver = HidPosDriver("bench-1-scale")
    with RecordingWriter(path, header) as writer:
        transport = RecordingTransport(
            UsbHidTransport(VID, PID, backend=_backend("garbled_reports")), writer)
        await transport.open()
        try:
            live = [o for _ in range(11)
                    for o in live_driver.feed(await transport.read(), 0.0)]
            await transport.write(live_driver.command("zero"))
        finally:
            await transport.close()
    recording = read_recording(path)
    assert [c.data for c in recording.chunks if c.direction == "tx"] == [b"\x02\x01"]
    replay_driver = HidPosDriver("bench-1-scale")
    replayed = replay_outputs(recording, replay_driver)
    assert [(r.value, r.flags, r.raw) for r in replayed if isinstance(r, Reading)] == [
        (r.value, r.flags, r.raw) for r in live if isinstance(r, Reading)]
    assert len(replayed) == 2
    assert replay_driver.stats.frame_errors == live_driver.stats.frame_errors == 9


async def test_a_replugged_scale_can_be_opened_again() -> None:
    backend = _backend("unplug_mid_stream")
    transport = UsbHidTransport(VID, PID, backend=backend)
    await transport.open()
    await _read_all(transport, HidPosDriver("s"), 3)
    with pytest.raises(TransportError):
        await transport.read()
    await transport.close()
    with pytest.raises(TransportError, match="no such USB device"):
        await UsbHidTransport(VID, PID, backend=backend).open()
    backend.device.replug()
    again = UsbHidTransport(VID, PID, backend=backend)
    await again.open()
    try:
        [reading] = await _read_all(again, HidPosDriver("s"), 1)  # the event after the unplug
    finally:
        await again.close()
    assert reading.value == pytest.approx(310.2)
    assert backend.device.kernel_driver_attached == {0: True}
