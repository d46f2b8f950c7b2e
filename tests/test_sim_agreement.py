"""Simulators and drivers agree on the wire: simulator bytes run through the real drivers.

The simulators keep their own copies of the protocol constants (written from docs/protocols.md,
docs/hid.md and the README's beam protocol section), so these tests compare behaviour, not
constants: a wrong number on either side makes the driver refuse or misread what the simulator
sends.
"""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

from heft.drivers.fake_usb import weight_report
from heft.drivers.fake_usb.reports import STATUS_NAMES, UNIT_CODES
from heft.drivers.protocols.beam import BeamDriver
from heft.drivers.protocols.hid_pos import HidPosDriver
from heft.drivers.reading import ClubTag, DeviceInfo, Flag, Reading, ValueKind
from heft.drivers.registry import create_driver
from heft.drivers.sim import encoders as enc
from heft.drivers.units import g_to_mass

DRIVERS_DIR = Path(__file__).resolve().parent.parent / "drivers"
SIMULATOR_DIRS = (DRIVERS_DIR / "sim", DRIVERS_DIR / "fake_usb")


def test_simulator_crc_meets_the_catalogue_check_value() -> None:
    # Greg Cook, "Catalogue of parametrised CRC algorithms", CRC-16/CCITT-FALSE: check=0x29b1.
    assert enc.crc16_ccitt_false(b"123456789") == 0x29B1
    assert enc.crc16_ccitt_false(b"") == 0xFFFF  # the initial value, nothing shifted through


@pytest.mark.parametrize("path", sorted(p for d in SIMULATOR_DIRS for p in d.rglob("*.py")),
                         ids=lambda p: str(p.relative_to(DRIVERS_DIR)))
def test_simulators_do_not_import_the_protocol_drivers(path: Path) -> None:
    """A simulator that took the driver's constants would mirror a wrong one in its own test."""
    tree = ast.parse(path.read_text(encoding="utf-8"))
    imported = [node.module or "" for node in ast.walk(tree) if isinstance(node, ast.ImportFrom)]
    imported += [a.name for node in ast.walk(tree) if isinstance(node, ast.Import)
                 for a in node.names]
    assert not [m for m in imported if m.startswith("heft.drivers.protocols")], path


# -- beam ------------------------------------------------------------------------------------


def test_beam_driver_reads_every_simulated_beam_line() -> None:
    driver = BeamDriver("beam-sim")
    hello = enc.beam_hello(firmware="sim-1", channels=2, rate_hz=80, bits=24, serial="S1")
    [info] = driver.feed(hello, 0.0)
    assert isinstance(info, DeviceInfo)
    assert (info.firmware, info.channels, info.sample_rate_hz, info.adc_bits,
            info.serial_number) == ("sim-1", 2, 80.0, 24, "S1")
    low, high = enc.adc_limits(24)
    samples = [(0, 1000, [8453, -12877]), (1, 1012, [low + 1, high - 1]), (2, 1025, [high, low])]
    readings: list[Reading] = []
    for seq, t_ms, counts in samples:
        out = driver.feed(enc.beam_sample(seq, t_ms, counts), 1.0)
        readings += [o for o in out if isinstance(o, Reading)]
    assert [(r.seq, r.channel, r.value) for r in readings] == [
        (seq, ch, float(c)) for seq, _, counts in samples for ch, c in enumerate(counts)]
    assert all(r.kind is ValueKind.COUNTS for r in readings)
    # The ADC's end codes are saturation (README beam protocol: OVERLOAD), the others are not.
    assert [Flag.OVERLOAD in r.flags for r in readings] == [False] * 4 + [True] * 2
    driver.feed(enc.beam_ok("ID") + enc.beam_err("RATE expects 10 or 80"), 2.0)
    assert [(r.ok, r.detail) for r in driver.pop_replies()] == [
        (True, "ID"), (False, "RATE expects 10 or 80")]
    assert driver.stats.frame_errors == 0 and driver.stats.noise_bytes == 0


def test_a_simulated_beam_line_with_one_bit_flipped_is_refused() -> None:
    line = enc.beam_sample(7, 4000, [123456, -654321])
    driver = BeamDriver("beam-sim")
    for i in range(1, len(line) - 1):  # every byte but the lead and the LF
        for bit in range(7):  # stay in ASCII so the flip reaches the checksum test
            bad = bytearray(line)
            bad[i] ^= 1 << bit
            assert not [o for o in driver.feed(bytes(bad), 1.0) if isinstance(o, Reading)], bad
    assert driver.stats.readings == 0


# -- HID point-of-sale scale -------------------------------------------------------------------

# What docs/hid.md's status table says each status becomes.
FLAGS_BY_STATUS = {
    "fault": Flag.FAULT, "zero": Flag.STABLE | Flag.AT_ZERO, "motion": Flag.MOTION,
    "stable": Flag.STABLE, "under": Flag.UNDERLOAD, "over": Flag.OVERLOAD,
    "needs_calibration": Flag.NEEDS_CALIBRATION, "needs_zero": Flag.NEEDS_ZERO,
}


@pytest.mark.parametrize("status", sorted(STATUS_NAMES))
def test_hid_driver_reads_each_simulated_status(status: str) -> None:
    [reading] = HidPosDriver("hid-sim").feed(weight_report(123.4, status), 0.0)
    assert isinstance(reading, Reading)
    assert reading.flags == FLAGS_BY_STATUS[status]
    assert reading.value == pytest.approx(123.4)


@pytest.mark.parametrize("unit", sorted(UNIT_CODES))
@pytest.mark.parametrize("exponent", [-3, -1, 0])
def test_hid_driver_reads_each_simulated_unit(unit: str, exponent: int) -> None:
    # A weight that fits 16 bits of steps in every unit and exponent: 50 of the unit's steps.
    weight_g = 50 * 10.0**exponent / g_to_mass(1.0, unit)
    driver = HidPosDriver("hid-sim")
    [reading] = driver.feed(weight_report(weight_g, "stable", unit=unit, exponent=exponent), 0.0)
    assert isinstance(reading, Reading)
    assert reading.device_unit == unit
    assert reading.value == pytest.approx(weight_g, rel=1e-9)
    assert driver.stats.frame_errors == 0


def test_hid_simulated_scale_clamps_as_the_driver_flags() -> None:
    driver = HidPosDriver("hid-sim")
    under, over = (driver.feed(weight_report(w, "stable"), 0.0)[0] for w in (-5.0, 1e9))
    assert isinstance(under, Reading) and isinstance(over, Reading)
    assert (under.value, under.flags, under.usable) == (0.0, Flag.UNDERLOAD, False)
    assert (over.flags, over.usable) == (Flag.OVERLOAD, False)
    assert over.value == pytest.approx(6553.5)  # 65535 steps of 0.1 g: the field's top


# -- text protocols ----------------------------------------------------------------------------


def test_poll_balance_reads_the_simulated_replies() -> None:
    driver = create_driver("poll_balance", "pb-sim")
    out = driver.feed(enc.poll_weight(123.45, "g", stable=True, decimals=2)
                      + enc.poll_weight(13.757, "oz", stable=False, decimals=3), 0.0)
    readings = [o for o in out if isinstance(o, Reading)]
    assert [(r.device_unit, Flag.STABLE in r.flags) for r in readings] == [
        ("g", True), ("oz", False)]
    assert readings[0].value == pytest.approx(123.45)
    # 1 oz = 28.349523125 g exactly (international avoirdupois, 1959).
    assert readings[1].value == pytest.approx(13.757 * 28.349523125)
    assert driver.stats.frame_errors == 0


def test_stream_balance_reads_the_simulated_lines() -> None:
    driver = create_driver("stream_balance", "sb-sim")
    lines = [enc.stream_line(121.8, "g", stable=True, net=False, decimals=2),
             enc.stream_line(-0.4, "g", stable=False, net=True, decimals=2),
             enc.stream_line(None, "g", stable=False, net=False, decimals=2, overload=True)]
    readings = [o for line in lines for o in driver.feed(line, 0.0) if isinstance(o, Reading)]
    assert [r.value for r in readings[:2]] == pytest.approx([121.8, -0.4])
    assert Flag.STABLE in readings[0].flags and Flag.NET in readings[1].flags
    assert Flag.OVERLOAD in readings[2].flags and not readings[2].usable
    assert driver.stats.frame_errors == 0


def test_regex_line_reads_the_simulated_template() -> None:
    pattern = r"^WT (?P<stable>ST|MO) +(?P<value>[-+]?\d+(?:\.\d+)?) (?P<unit>[a-z]+)$"
    driver = create_driver("regex_line", "rl-sim",
                           {"pattern": pattern, "stable_match": "^ST$"})
    line = enc.template_line("WT {stable} {value:>9} {unit}", 390.12, "g", "ST", decimals=2)
    [reading] = driver.feed(line, 0.0)
    assert isinstance(reading, Reading)
    assert reading.value == pytest.approx(390.12)
    assert Flag.STABLE in reading.flags


def test_scanner_reads_the_simulated_scan() -> None:
    driver = create_driver("scanner", "sc-sim", {"prefix": "]C1"})
    [tag] = driver.feed(enc.scan_line("LC-10231", prefix="]C1"), 0.0)
    assert isinstance(tag, ClubTag) and tag.club_id == "LC-10231"
