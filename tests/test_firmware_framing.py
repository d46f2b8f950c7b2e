"""The reference beam firmware's framing (drivers/firmware/heft_beam/framing.py) against the host.

The firmware module is pure and runs on CPython too; here its frames go through the host's
BeamDriver and the host's commands through the firmware's parser.
"""

from __future__ import annotations

import functools
import importlib
import logging
import operator
import py_compile
import sys
import types
from pathlib import Path

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from heft.drivers.firmware.heft_beam import framing
from heft.drivers.protocols import beam as host
from heft.drivers.protocols.beam import BeamDriver
from heft.drivers.reading import DeviceInfo, Flag, Reading, ValueKind

FIRMWARE = Path(__file__).resolve().parent.parent / "drivers" / "firmware" / "heft_beam"


def test_crc16_matches_the_catalogue_check_value() -> None:
    # Greg Cook, "Catalogue of parametrised CRC algorithms", CRC-16/CCITT-FALSE
    # (width=16 poly=0x1021 init=0xffff refin=false refout=false xorout=0x0000): check=0x29b1.
    assert framing.checksum(b"123456789") == 0x29B1  # the board's bitwise loop
    assert host.checksum(b"123456789") == 0x29B1  # the host's binascii.crc_hqx


@settings(max_examples=200, deadline=None)
@given(body=st.binary(max_size=120))
def test_board_and_host_crc_agree(body: bytes) -> None:
    assert framing.checksum(body) == host.checksum(body)


def test_the_protocol_doc_example_is_what_the_board_sends() -> None:
    # docs/protocols.md section e quotes this line; its CRC must be the board's.
    doc = (Path(__file__).resolve().parent.parent / "docs" / "protocols.md").read_text()
    assert "`$17,40213,445790,278889*B841`" in doc
    assert framing.sample_line(17, 40213, [445790, 278889]) == b"$17,40213,445790,278889*B841\n"


def test_old_two_digit_xor_frames_are_bad_frames(caplog: pytest.LogCaptureFixture) -> None:
    # Firmware from before the CRC: "$0,10,5000*" + two-digit XOR of the body.
    body = b"0,10,5000"
    old = b"$" + body + b"*%02X\n" % functools.reduce(operator.xor, body)
    driver = BeamDriver("beam-1")
    with caplog.at_level(logging.WARNING, logger="heft.drivers"):
        assert driver.feed(old, 1.0) == []
    assert driver.stats.frame_errors == 1
    assert "checksum must be 4 hex digits (CRC-16)" in driver.stats.last_error
    assert any("checksum must be 4 hex digits (CRC-16)" in r.getMessage()
               and "beam-1" in r.getMessage() for r in caplog.records)
    # The same body with its CRC reads.
    assert [r.value for r in driver.feed(framing.frame("$", body.decode()), 1.1)
            if isinstance(r, Reading)] == [5000.0]


def test_lower_case_crc_is_a_bad_frame() -> None:
    line = framing.frame("$", "0,10,5000")
    digits = line[-5:-1]
    assert digits.lower() != digits  # the CRC has a letter to lower
    driver = BeamDriver("beam-1")
    assert driver.feed(line[:-5] + digits.lower() + b"\n", 1.0) == []
    assert driver.stats.frame_errors == 1 and "upper-case" in driver.stats.last_error


@settings(max_examples=200, deadline=None)
@given(seq=st.integers(0, 10**6), t_ms=st.integers(0, 2**40),
       counts=st.lists(st.integers(-(2**23), 2**23 - 1), min_size=1, max_size=4))
def test_sample_round_trip(seq: int, t_ms: int, counts: list[int]) -> None:
    out = BeamDriver("beam-1").feed(framing.sample_line(seq, t_ms, counts), 5.0)
    assert len(out) == len(counts)
    lo, hi = framing.adc_limits(24)
    for ch, (reading, c) in enumerate(zip(out, counts, strict=True)):
        assert isinstance(reading, Reading)
        assert (reading.channel, reading.value, reading.kind) == (ch, float(c), ValueKind.COUNTS)
        assert reading.seq == seq % 65536  # the wire wraps seq at 2^16 ...
        assert reading.device_time_s == (t_ms % 2**32) / 1000  # ... and t_ms at 2^32
        assert (Flag.OVERLOAD in reading.flags) == (c in (lo, hi))


@settings(max_examples=100, deadline=None)
@given(fw=st.from_regex(r"[A-Za-z0-9.\-]{1,16}", fullmatch=True), channels=st.integers(1, 2),
       rate=st.sampled_from([10, 80]), bits=st.integers(16, 24),
       sn=st.from_regex(r"[0-9a-f]{1,16}", fullmatch=True))
def test_hello_round_trip(fw: str, channels: int, rate: int, bits: int, sn: str) -> None:
    (info,) = BeamDriver("beam-1").feed(framing.hello_line(fw, channels, rate, bits, sn), 1.0)
    assert info == DeviceInfo(device="beam-1", model="heft-beam/1", firmware=fw,
                              serial_number=sn, channels=channels, sample_rate_hz=float(rate),
                              adc_bits=bits)


def test_ok_and_err_lines_become_replies() -> None:
    driver = BeamDriver("beam-1")
    assert driver.feed(framing.ok_line("RATE 80") + framing.err_line("RATE 40 not possible"),
                       1.0) == []
    assert [(r.command, r.ok) for r in driver.pop_replies()] == [("rate", True), ("rate", False)]


@pytest.mark.parametrize(("command", "arg", "parsed"), [
    ("identify", None, ("ID", None)), ("rate", "80", ("RATE", "80")),
    ("reboot", None, ("REBOOT", None)),
])
def test_host_commands_parse_on_the_board(
    command: str, arg: str | None, parsed: tuple[str, str | None]
) -> None:
    wire = BeamDriver("beam-1").command(command, arg)
    reader = framing.CommandReader()
    (line,) = reader.feed(wire)
    assert framing.parse_command(line) == parsed


def test_board_command_reader_handles_crlf_split_and_overflow() -> None:
    reader = framing.CommandReader()
    assert reader.feed(b"!RA") == []
    assert reader.feed(b"TE 10\r\n!ID\n") == [b"!RATE 10", b"!ID"]
    assert reader.feed(b"!" + b"X" * 200 + b"\n!ID\n") == [b"!ID"]  # over-long line dropped


@pytest.mark.parametrize("line", [b"ID", b"!", b"!RATE", b"!RATE ten", b"!FLASH", b"\xff!ID"])
def test_board_rejects_malformed_commands(line: bytes) -> None:
    with pytest.raises(ValueError):
        framing.parse_command(line)


def test_twos_complement_matches_hx711_output_codes() -> None:
    # HX711 datasheet: output 800000h is the minimum, 7FFFFFh the maximum (24-bit 2's complement).
    assert framing.from_twos_complement(0x800000, 24) == -(2**23)
    assert framing.from_twos_complement(0x7FFFFF, 24) == 2**23 - 1
    assert framing.from_twos_complement(0xFFFFFF, 24) == -1
    assert framing.from_twos_complement(0x000001, 24) == 1
    assert framing.adc_limits(24) == (-(2**23), 2**23 - 1)


def test_millis_clock_spans_the_ports_tick_wrap() -> None:
    """MicroPython ticks_ms wraps at 2^30 on most ports; the wire's t_ms wraps at 2^32."""
    period = 2**30

    def ticks_diff(a: int, b: int) -> int:  # MicroPython semantics: signed, modulo the period
        return ((a - b + period // 2) % period) - period // 2

    clock = framing.MillisClock(period - 100)
    assert clock.update(period - 50, ticks_diff) == 50
    assert clock.update(30, ticks_diff) == 130  # the tick counter wrapped; ours did not
    clock.ms = 2**32 - 10
    assert clock.update(40, ticks_diff) == 0  # and ours wraps at 2^32 as the protocol says


def test_frame_refuses_bodies_that_would_break_framing() -> None:
    for body in ("a*b", "a\nb", "a\rb"):
        with pytest.raises(ValueError):
            framing.frame("$", body)
    with pytest.raises(ValueError):
        framing.frame("%", "x")


@pytest.mark.parametrize("name", ["main.py", "hx711.py", "config.py", "framing.py"])
def test_firmware_files_are_valid_python(name: str, tmp_path: Path) -> None:
    py_compile.compile(str(FIRMWARE / name), cfile=str(tmp_path / "x.pyc"), doraise=True)


def test_framing_has_no_cpython_only_imports() -> None:
    """framing.py must load on the board: it imports nothing at all."""
    source = (FIRMWARE / "framing.py").read_text()
    assert not [ln for ln in source.splitlines() if ln.startswith(("import ", "from "))]


# --- hx711.py against a simulated HX711 (the chip cannot be on a CI machine) -------------------


class SimHX711:
    """An HX711 as its datasheet describes the serial interface (from memory): DOUT low = data
    ready; each PD_SCK rising edge shifts out the next bit, MSB first; after the 24th bit DOUT
    goes high; the total pulse count (25/26/27) picks gain 128 / 32 / 64 for the next sample."""

    def __init__(self, word: int) -> None:
        self.word, self.pulses, self.dout = word & 0xFFFFFF, 0, 0

    def rising_edge(self) -> None:
        self.pulses += 1
        self.dout = (self.word >> (24 - self.pulses)) & 1 if self.pulses <= 24 else 1


class SimBoard:
    def __init__(self, sck: int, chips: dict[int, SimHX711]) -> None:
        self.sck, self.chips, self.levels = sck, chips, {sck: 0}
        self.irq_disabled = 0
        self.rises_with_irq_on = 0

    def machine_module(self) -> types.ModuleType:
        board = self

        class Pin:
            IN, OUT, PULL_UP = 0, 1, 2

            def __init__(self, pin: int, mode: int = -1, pull: int = -1, *,
                         value: int | None = None) -> None:
                self.pin = pin
                if value is not None:
                    self.value(value)

            def value(self, level: int | None = None) -> int | None:
                if level is None:
                    chip = board.chips.get(self.pin)
                    return chip.dout if chip is not None else board.levels.get(self.pin, 0)
                if self.pin == board.sck and level and not board.levels[board.sck]:
                    # PD_SCK high for more than 60 us powers the HX711 down (datasheet, from
                    # memory): an interrupt landing mid-pulse could stretch it that long.
                    board.rises_with_irq_on += board.irq_disabled == 0
                    for chip in board.chips.values():
                        chip.rising_edge()
                board.levels[self.pin] = level
                return None

        def disable_irq() -> int:
            board.irq_disabled += 1
            return 7

        def enable_irq(state: int) -> None:
            assert state == 7
            board.irq_disabled -= 1

        module = types.ModuleType("machine")
        module.Pin = Pin  # type: ignore[attr-defined]
        module.disable_irq = disable_irq  # type: ignore[attr-defined]
        module.enable_irq = enable_irq  # type: ignore[attr-defined]
        return module


def load_hx711(monkeypatch: pytest.MonkeyPatch, board: SimBoard) -> types.ModuleType:
    monkeypatch.setitem(sys.modules, "machine", board.machine_module())
    monkeypatch.syspath_prepend(str(FIRMWARE))
    for name in ("hx711", "framing"):
        # setitem remembers the state before (normally: absent), so teardown restores it.
        monkeypatch.setitem(sys.modules, name, None)  # type: ignore[arg-type]
        del sys.modules[name]
    return importlib.import_module("hx711")


@pytest.mark.parametrize(("gain", "pulses"), [(128, 25), (32, 26), (64, 27)])
def test_bank_reads_two_chips_on_one_clock(
    monkeypatch: pytest.MonkeyPatch, gain: int, pulses: int
) -> None:
    a, b = SimHX711(0x800000), SimHX711(0x001234)
    board = SimBoard(sck=3, chips={2: a, 4: b})
    hx711 = load_hx711(monkeypatch, board)
    bank = hx711.HX711Bank([2, 4], 3, gain=gain)
    assert bank.ready()
    assert bank.read() == [-(2**23), 0x1234]
    assert (a.pulses, b.pulses) == (pulses, pulses)
    assert not bank.ready()  # DOUT high until the next conversion
    assert board.irq_disabled == 0 and board.levels[3] == 0  # SCK left low: chips stay awake
    assert board.rises_with_irq_on == 0  # every clock pulse ran with interrupts off


def test_bank_names_the_channels_whose_adc_is_not_ready(monkeypatch: pytest.MonkeyPatch) -> None:
    a, b = SimHX711(5), SimHX711(6)
    board = SimBoard(sck=3, chips={2: a, 4: b})
    bank = load_hx711(monkeypatch, board).HX711Bank([2, 4], 3)
    assert bank.not_ready() == []
    b.dout = 1  # channel 1 never converts: its DT wire is loose (the pull-up holds it high)
    assert not bank.ready() and bank.not_ready() == [1]


def test_ready_watch_reports_a_dead_adc_once_per_repeat(
    caplog: pytest.LogCaptureFixture,
) -> None:
    """No conversion for timeout_ms: report; then again only every repeat_ms; a sample resets."""
    watch = framing.ReadyWatch(0, timeout_ms=1000, repeat_ms=5000)

    def diff(a: int, b: int) -> int:
        return a - b

    due = [t for t in range(0, 12_000, 100) if watch.update(t, diff)]
    assert due == [1000, 6000, 11000]
    watch.sample(12_000)
    assert not watch.update(12_500, diff)
    assert watch.update(13_000, diff)  # a new fault after a good sample is reported at once
    driver = BeamDriver("beam-1")
    out = driver.feed(
        framing.err_line("ADC not ready ch=1: check HX711 power, DT and SCK wiring"), 1.0)
    assert out == [] and driver.stats.frame_errors == 0  # a valid frame, not a reading
    assert [r.getMessage() for r in caplog.records if r.levelname == "WARNING"] == [
        "device 'beam-1' reports an error: ADC not ready ch=1: check HX711 power, DT and SCK "
        "wiring"]


def test_bank_output_frames_and_parses_on_the_host(monkeypatch: pytest.MonkeyPatch) -> None:
    board = SimBoard(sck=3, chips={2: SimHX711(0x7FFFFF), 4: SimHX711(0xFFFFFE)})
    hx711 = load_hx711(monkeypatch, board)
    counts = hx711.HX711Bank([2, 4], 3).read()
    out = BeamDriver("beam-1").feed(framing.sample_line(7, 1234, counts), 1.0)
    assert [(r.value, r.flags) for r in out if isinstance(r, Reading)] == [
        (float(2**23 - 1), Flag.OVERLOAD), (-2.0, Flag.NONE)]


def test_board_modules_do_not_leak_between_tests() -> None:
    assert "machine" not in sys.modules and "hx711" not in sys.modules


def test_rate_pin_and_bad_gain(monkeypatch: pytest.MonkeyPatch) -> None:
    board = SimBoard(sck=3, chips={2: SimHX711(0)})
    hx711 = load_hx711(monkeypatch, board)
    assert hx711.HX711Bank([2], 3).set_rate(80) is False  # RATE not wired
    bank = hx711.HX711Bank([2], 3, rate_pin=5)
    assert bank.set_rate(80) and board.levels[5] == 1
    assert bank.set_rate(10) and board.levels[5] == 0
    assert not bank.set_rate(40)
    with pytest.raises(ValueError):
        hx711.HX711Bank([2], 3, gain=100)
