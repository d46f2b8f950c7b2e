"""Each protocol parses its recorded fixtures (hardware_fixtures/) to exactly these outputs.

The expected values are read off the lines in hardware_fixtures/make_recordings.py by hand.
Unit conversions use the exact definitions of the international avoirdupois ounce and pound
(1 oz = 28.349523125 g, 1 lb = 453.59237 g; international yard and pound agreement, 1959).
"""

from __future__ import annotations

import math
import re
from pathlib import Path

import pytest

from heft.drivers.base import CommandReply, Driver
from heft.drivers.protocols.beam import BeamDriver
from heft.drivers.reading import ClubTag, DeviceInfo, DriverOutput, Flag, Reading, ValueKind
from heft.drivers.recording import read_recording, replay_outputs
from heft.drivers.registry import create_driver

FIXTURES = Path(__file__).resolve().parent.parent / "hardware_fixtures"
OZ_G = 28.349523125  # exact, 1959 agreement
LB_G = 453.59237  # exact, 1959 agreement
S, D, NET = Flag.STABLE, Flag.MOTION, Flag.NET
# Bytes of the ESP32 boot banner in the beam fixtures, line ends not counted (they frame lines).
BANNER_NOISE_BYTES = 248


def replay(relative: str) -> tuple[Driver, list[DriverOutput]]:
    rec = read_recording(FIXTURES / relative)
    driver = create_driver(rec.header.driver, rec.header.device, rec.header.options)
    outputs = replay_outputs(rec, driver)
    # Outputs come in time order and each reading's raw frame is one of the received lines.
    stamps = [o.t_mono_s for o in outputs if not isinstance(o, DeviceInfo)]
    assert stamps == sorted(stamps)
    received = b"".join(c.data for c in rec.rx)
    for o in outputs:
        if isinstance(o, (Reading, ClubTag)):
            assert o.raw in received
    return driver, outputs


def grams(outputs: list[DriverOutput]) -> list[tuple[float, str, Flag]]:
    """(value in g, unit sent, flags) of every reading; NaN kept as NaN."""
    out = []
    for o in outputs:
        assert isinstance(o, Reading), o
        assert o.kind is ValueKind.GRAMS and o.channel == 0
        out.append((o.value, o.device_unit, o.flags))
    return out


def assert_same(actual: list[tuple[float, str, Flag]], expected: list[tuple[float, str, Flag]]):
    assert len(actual) == len(expected), actual
    for (av, au, af), (ev, eu, ef) in zip(actual, expected, strict=True):
        assert (au, af) == (eu, ef)
        if math.isnan(ev):
            assert math.isnan(av)
        else:
            assert av == pytest.approx(ev, rel=1e-12, abs=1e-12)


def replies(driver: Driver) -> list[tuple[str, bool, float | None]]:
    return [(r.command, r.ok, r.value_g) for r in driver.pop_replies()]


# --- a. poll balance ------------------------------------------------------------------------


def test_poll_balance_continuous_recording() -> None:
    driver, out = replay("recordings/poll_balance_continuous.jsonl")
    assert_same(grams(out), [
        (0.0, "g", S), (87.12, "g", D), (311.56, "g", D), (335.02, "g", D), (331.84, "g", D),
        (332.41, "g", S), (332.41, "g", S), (0.0, "g", S), (-150.20, "g", D),
        (-332.41, "g", S),
    ])
    assert replies(driver) == [("tare", True, 332.41)]
    s = driver.stats
    assert (s.frame_errors, s.noise_bytes, s.readings) == (0, 0, 10)


def test_poll_balance_polled_recording() -> None:
    driver, out = replay("recordings/poll_balance_polled.jsonl")
    info = [o for o in out if isinstance(o, DeviceInfo)]
    assert info == [DeviceInfo(device="qc-1", serial_number="LC0042117")]
    assert_same(grams([o for o in out if isinstance(o, Reading)]), [
        (12.07, "g", D), (0.31, "g", S), (0.31, "g", S), (0.0, "g", S), (45.90, "g", S),
    ])
    assert replies(driver) == [("zero", False, None), ("zero", True, None),
                               ("identify", True, None)]
    assert driver.stats.frame_errors == 1  # 'S I' (busy) is counted, not a reading
    assert driver.poll_request() == b"SI\r\n" and driver.poll_interval_s == 0.25


def test_poll_balance_malformed() -> None:
    driver, out = replay("malformed/poll_balance_errors.jsonl")
    nan = math.nan
    assert_same(grams(out), [
        (10.0, "g", S), (10.5, "g", S), (nan, "g", Flag.OVERLOAD), (nan, "g", Flag.UNDERLOAD),
        (10.25, "g", D),
    ])
    assert not any(o.usable for o in out if isinstance(o, Reading) and math.isnan(o.value))
    # ES, ET, EL, S I, truncated, binary noise, over-long line, unknown unit 'lbs'
    assert driver.stats.frame_errors == 8
    assert driver.stats.noise_bytes == 0


# --- b. stream balance ----------------------------------------------------------------------


def test_stream_balance_recording() -> None:
    driver, out = replay("recordings/stream_balance.jsonl")
    assert_same(grams(out), [
        (0.0, "g", S), (121.80, "g", D), (199.36, "g", D), (197.02, "g", D), (198.14, "g", S),
        (198.14, "g", S), (6.989 * OZ_G, "oz", S), (0.0, "oz", S | NET),
        (-6.120 * OZ_G, "oz", D | NET),
    ])
    # The TR line is the tare the balance took: a reply, never a reading.
    assert replies(driver) == [("tare", True, pytest.approx(6.989 * OZ_G))]
    assert driver.stats.frame_errors == 0


def test_stream_balance_unit_switches_and_overload() -> None:
    driver, out = replay("malformed/stream_balance_units_overload.jsonl")
    nan = math.nan
    assert_same(grams(out), [
        (250.0, "g", S), (8.818 * OZ_G, "oz", S), (0.551155 * LB_G, "lb", S),
        (nan, "lb", Flag.OVERLOAD), (nan, "lb", Flag.OVERLOAD), (250.0, "kg", S),
    ])
    # truncated value, unknown header XX, length unit mm, binary noise
    assert driver.stats.frame_errors == 4


# --- c. regex line --------------------------------------------------------------------------


def test_regex_line_recording() -> None:
    driver, out = replay("recordings/regex_line.jsonl")
    assert_same(grams(out), [
        (0.0, "g", D), (44.8, "g", D), (45.6, "g", D), (45.2, "g", S), (45.2, "g", S),
        (-0.4, "g", S),
    ])
    assert driver.poll_request() == b"P\r\n" and driver.poll_interval_s == 0.2
    assert driver.stats.frame_errors == 0


# --- e. beam --------------------------------------------------------------------------------


def beam_samples(out: list[DriverOutput]) -> list[tuple[int, int, float, float, Flag]]:
    """(seq, channel, counts, device time, flags) of every reading."""
    rows = []
    for o in out:
        if isinstance(o, Reading):
            assert o.kind is ValueKind.COUNTS and o.device_unit == "counts"
            assert o.seq is not None and o.device_time_s is not None
            rows.append((o.seq, o.channel, o.value, o.device_time_s, o.flags))
    return rows


def test_beam_recording() -> None:
    driver, out = replay("recordings/beam_2ch.jsonl")
    hello_80 = DeviceInfo(device="beam-1", model="heft-beam/1", firmware="hb-mpy-1.0",
                          serial_number="e8db84a1b2c3", channels=2, sample_rate_hz=80.0,
                          adc_bits=24)
    infos = [o for o in out if isinstance(o, DeviceInfo)]
    assert infos == [hello_80, DeviceInfo(**{**_fields(hello_80), "sample_rate_hz": 10.0})]
    counts = [(-8123, 15880), (-8120, 15877), (-8125, 15884), (402311, 251003),
              (457950, 286512), (441208, 276016), (446930, 279598), (445301, 278581),
              (445812, 278902), (445790, 278889)]
    expected = []
    for seq, pair in enumerate(counts):
        for ch, c in enumerate(pair):
            expected.append((seq, ch, float(c), (4000 + 12 * seq) / 1000, Flag.NONE))
    expected += [(0, 0, 445800.0, 4.3, Flag.NONE), (0, 1, 278895.0, 4.3, Flag.NONE),
                 (1, 0, 445797.0, 4.4, Flag.NONE), (1, 1, 278893.0, 4.4, Flag.NONE)]
    assert beam_samples(out) == expected
    assert replies(driver) == [("rate", True, None)]
    s = driver.stats
    assert (s.noise_bytes, s.frame_errors, s.seq_gaps, s.lost_samples) == (
        BANNER_NOISE_BYTES, 0, 0, 0)


def _fields(info: DeviceInfo) -> dict[str, object]:
    return {f: getattr(info, f) for f in info.__slots__}  # type: ignore[attr-defined]


def test_beam_bad_frames() -> None:
    driver, out = replay("malformed/beam_bad_frames.jsonl")
    high, low = 2**23 - 1, -(2**23)
    n = Flag.NONE
    assert beam_samples(out) == [
        (0, 0, 5000.0, 1.0, n), (0, 1, -3000.0, 1.0, n),
        (7, 0, 5007.0, 1.7, n), (7, 1, -3007.0, 1.7, n),
        (8, 0, float(high), 1.8, Flag.OVERLOAD), (8, 1, -3008.0, 1.8, n),
        (9, 0, 5009.0, 1.9, n), (9, 1, float(low), 1.9, Flag.OVERLOAD),
        (12, 0, 5012.0, 2.2, n), (12, 1, -3012.0, 2.2, n),
        (14, 0, 5014.0, 2.4, n), (14, 1, -3014.0, 2.4, n),
    ]
    s = driver.stats
    # wrong CRC, lower-case CRC, no check, old two-digit XOR form, flipped digit, swapped digits
    # (invisible to an XOR sum), truncated run-on, 3 channels
    assert s.frame_errors == 8
    assert (s.seq_gaps, s.lost_samples) == (3, 6 + 2 + 1)
    assert replies(driver) == [("?", False, None)]  # '#ERR unknown command FOO'


def test_beam_boot_banner_is_noise_not_errors() -> None:
    driver, out = replay("malformed/beam_boot_then_silent.jsonl")
    assert [o.value for o in out if isinstance(o, Reading)] == [1200.0, 1201.0, 1202.0]
    assert (driver.stats.noise_bytes, driver.stats.frame_errors) == (BANNER_NOISE_BYTES, 0)


def test_beam_refuses_another_major_version(caplog: pytest.LogCaptureFixture) -> None:
    driver, out = replay("malformed/beam_version_2.jsonl")
    assert out == []
    assert isinstance(driver, BeamDriver) and driver.refused is not None
    assert "heft-beam/2" in driver.refused and "heft-beam/1" in driver.refused
    assert any("heft-beam/2" in r.getMessage() for r in caplog.records)
    assert driver.stats.frame_errors == 2  # its two samples


# --- f. scanner -----------------------------------------------------------------------------


def tags(out: list[DriverOutput]) -> list[str]:
    assert all(isinstance(o, ClubTag) for o in out)
    return [o.club_id for o in out if isinstance(o, ClubTag)]


def test_scanner_recording() -> None:
    driver, out = replay("recordings/scanner.jsonl")
    assert tags(out) == ["LC-10231", "LC-10232", "LC-20017"]
    assert driver.stats.frame_errors == 0


def test_scanner_bad_scans() -> None:
    driver, out = replay("malformed/scanner_bad_scans.jsonl")
    assert tags(out) == ["LC-10231", "LC-10233"]
    # control character, missing prefix, pattern mismatch, empty id (the blank line is skipped)
    assert driver.stats.frame_errors == 4


def test_hid_pos_recording() -> None:
    # Hand-decoded from the hex in make_recordings.hid_pos: raw x 10^exponent in the unit sent.
    driver, out = replay("recordings/hid_pos.jsonl")
    zero = S | Flag.AT_ZERO
    assert_same(grams(out), [
        (0.0, "g", zero), (287.5, "g", D), (309.8, "g", D), (310.2, "g", S),
        (11.46 * OZ_G, "oz", S), (0.0, "oz", zero),
    ])
    s = driver.stats
    assert (s.frame_errors, s.noise_bytes, s.readings, s.bytes_in) == (0, 0, 6, 36)


def test_every_fixture_has_a_test() -> None:
    """A new recording without expectations here is a test gap: fail until it is covered.

    Covered means replayed by a test of this module (``replay("<folder>/<file>")``), so the list
    cannot drift from the tests that really read the files.
    """
    covered = set(re.findall(r'replay\("([^"]+)"\)', Path(__file__).read_text()))
    mine = {"poll_balance", "stream_balance", "regex_line", "beam", "scanner", "hid_pos"}
    present = {
        str(p.relative_to(FIXTURES))
        for folder in ("recordings", "malformed") for p in (FIXTURES / folder).glob("*.jsonl")
        if read_recording(p).header.driver in mine
    }
    assert len(present) >= 13 and covered >= present, sorted(present - covered)


def test_reply_objects_carry_device_and_raw() -> None:
    driver, _ = replay("recordings/poll_balance_continuous.jsonl")
    # pop_replies was not called yet in this replay: the tare reply is there, with its frame.
    (reply,) = driver.pop_replies()
    assert isinstance(reply, CommandReply)
    assert reply.device == "bench-1" and reply.raw == b"T S     332.41 g"
    assert driver.pop_replies() == []
