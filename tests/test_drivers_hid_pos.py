"""USB HID POS scales: the fixtures and the hid_pos driver on its own, and shared test helpers.

The transport end to end through pyusb is in tests/test_drivers_hid_usb.py, the simulated scale
builder in tests/test_drivers_hid_sim_scale.py; both use the helpers here. Expected readings come
from the fixtures' hand-written ``expect`` fields; unit definitions checked here are exact by
definition (international pound and yard agreement 1959: 1 lb = 453.59237 g, 1 oz = 1/16 lb;
1 grain = 64.79891 mg; troy ounce = 480 grains; pennyweight = 24 grains; metric carat = 200 mg;
NIST Handbook 44 appendix C). Unit and status codes are those of the HID Usage Tables, Scales
page 0x8D (usages 0x51..0x5C and 0x71..0x78), as listed in docs/protocols.md d.
"""

from __future__ import annotations

import asyncio
import json
import time
from pathlib import Path
from typing import Any

import hid_parser
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from heft.drivers.base import UnsupportedCommand
from heft.drivers.fake_usb import (
    SCALE_REPORT_DESCRIPTOR,
    FakeBackend,
    FakeUsbDevice,
    FixtureError,
    ReportEvent,
    load_device_definition,
    load_sequence,
)
from heft.drivers.protocols.hid_pos import UNIT_CODES, HidPosDriver
from heft.drivers.reading import Flag, Reading
from heft.drivers.registry import create_driver
from heft.drivers.usb_transport import (
    UsbHidTransport,
    report_layout,
)

FIXTURES = Path(__file__).resolve().parent.parent / "hardware_fixtures" / "usb"
SEQUENCES = sorted((FIXTURES / "sequences").glob("*.json"))
DEVICE_FILE = FIXTURES / "devices" / "fernbrake-ps5.json"
VID, PID, SERIAL = 0x1209, 0x0001, "FB-PS5-0042"

GRAMS_PER_OUNCE = 453.59237 / 16  # international avoirdupois ounce, exact (1959)
GRAMS_PER_GRAIN = 0.06479891  # exact (1959)


def expected_of(events: tuple[ReportEvent, ...]) -> list[Any]:
    return [e.expect for e in events if e.rx is not None and e.expect is not None]


def check_reading(reading: Reading, expect: dict[str, Any]) -> None:
    assert reading.value == pytest.approx(expect["g"], rel=1e-12, abs=1e-12)
    assert reading.device_unit == expect["unit"]
    flags = Flag.NONE
    for name in expect["flags"]:
        flags |= Flag[name]
    assert reading.flags == flags
    assert reading.usable == expect.get("usable", True)


async def read_all(transport: UsbHidTransport, driver: HidPosDriver, reports: int,
                    ) -> list[Reading]:
    readings: list[Reading] = []
    for _ in range(reports):
        data = await asyncio.wait_for(transport.read(), 10)
        readings.extend(o for o in driver.feed(data, time.monotonic()) if isinstance(o, Reading))
    return readings


def sequence_backend(name: str, **device_kw: Any) -> FakeBackend:
    definition, sequence = load_sequence(FIXTURES / "sequences" / f"{name}.json")
    return FakeBackend(FakeUsbDevice(definition, sequence.events, end=sequence.end,
                                     **device_kw))


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
    expected = expected_of(sequence.events)
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
            check_reading(out[0], expect)
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
