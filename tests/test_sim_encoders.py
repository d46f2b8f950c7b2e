"""Frames of the simulators, byte for byte as docs/protocols.md writes them."""

from __future__ import annotations

import re

import pytest

from heft.drivers.sim import encoders as enc


def _crc16_by_division(body: bytes) -> int:
    """CRC-16/CCITT-FALSE as polynomial long division, independent of the code under test.

    The register algorithm with init I over an n-bit message M is the remainder of
    I*x^n + M*x^16 modulo G = x^16 + x^12 + x^5 + 1 (0x11021) over GF(2) (textbook CRC algebra).
    """
    m = (0xFFFF << (8 * len(body))) ^ (int.from_bytes(body, "big") << 16)
    while m.bit_length() > 16:
        m ^= 0x11021 << (m.bit_length() - 17)
    return m


def test_reference_crc_meets_the_catalogue_check_value() -> None:
    # Greg Cook, "Catalogue of parametrised CRC algorithms", CRC-16/CCITT-FALSE: check=0x29b1.
    assert _crc16_by_division(b"123456789") == 0x29B1


def test_poll_reply_matches_the_contract_example() -> None:
    # docs/protocols.md section a: `S S     123.45 g`, value right-aligned in 10 characters.
    assert enc.poll_weight(123.45, "g", stable=True, decimals=2) == b"S S     123.45 g\r\n"
    assert enc.poll_weight(-1.2, "g", stable=False, decimals=2) == b"S D      -1.20 g\r\n"
    assert enc.poll_weight(13.757, "oz", stable=True, decimals=3) == b"S S     13.757 oz\r\n"
    assert enc.poll_weight(100.0, "g", stable=True, decimals=2, cmd="T") == b"T S     100.00 g\r\n"
    assert enc.poll_status("S", "+") == b"S +\r\n"
    assert enc.poll_status("Z", "A") == b"Z A\r\n"
    assert enc.poll_reset("PB22-1") == b'I4 A "PB22-1"\r\n'
    assert enc.poll_error() == b"ES\r\n"
    with pytest.raises(ValueError):
        enc.poll_error("EX")


def test_negative_zero_is_written_as_zero() -> None:
    assert enc.poll_weight(-0.001, "g", stable=True, decimals=2) == b"S S       0.00 g\r\n"


def test_stream_line_fields() -> None:
    # Section b: H1,H2, sign then 8 characters zero-padded with the point, unit right-aligned
    # in 4 characters. (The contract's example shows two spaces before `g`; the field rule says
    # four characters, i.e. three spaces, which is what we send.)
    line = enc.stream_line(123.45, "g", stable=True, net=False, decimals=2)
    assert line == b"ST,GS,+00123.45   g\r\n"
    m = re.fullmatch(rb"(ST|US|OL),(GS|NT|TR),([+-])(.{8})(.{4})\r\n", line)
    assert m is not None and m.group(5) == b"   g"
    assert enc.stream_line(-1.2, "g", stable=False, net=True, decimals=2) == (
        b"US,NT,-00001.20   g\r\n"
    )
    assert enc.stream_line(0.5, "ozt", stable=True, net=False, decimals=3) == (
        b"ST,GS,+0000.500 ozt\r\n"
    )
    assert enc.stream_line(None, "g", stable=False, net=False, decimals=2, overload=True) == (
        b"OL,GS,+9999999   g\r\n"
    )
    assert enc.stream_line(50.0, "g", stable=True, net=False, decimals=2, tare=True)[:6] == (
        b"ST,TR,"
    )
    with pytest.raises(ValueError, match="8-character"):
        enc.stream_line(1234567.0, "g", stable=True, net=False, decimals=2)


def test_template_line() -> None:
    line = enc.template_line("WT {stable} {value:>9} {unit}", 390.1, "g", "ST", decimals=1)
    assert line == b"WT ST     390.1 g\r\n"


@pytest.mark.parametrize(("step", "decimals"), [(0.01, 2), (0.05, 2), (0.1, 1), (1.0, 0),
                                                (0.001, 3), (0.002, 3), (10.0, 0)])
def test_decimals_for_step(step: float, decimals: int) -> None:
    assert enc.decimals_for_step(step) == decimals


def test_beam_checksum_against_the_reference_crc() -> None:
    # "OK ID" -> 0x2CCC by the long division above (and binascii.crc_hqx(b"OK ID", 0xFFFF)).
    assert _crc16_by_division(b"OK ID") == 0x2CCC
    assert enc.beam_ok("ID") == b"#OK ID*2CCC\n"


def test_beam_lines_carry_a_valid_checksum_and_the_contract_fields() -> None:
    hello = enc.beam_hello(firmware="hb-0.3.1", channels=2, rate_hz=80, bits=24, serial="X1")
    sample = enc.beam_sample(65537, 2**32 + 5, [8453, -12877])
    err = enc.beam_err("RATE expects 10 or 80")
    for line in (hello, sample, err):
        m = re.fullmatch(rb"([#$])([^*]*)\*([0-9A-F]{4})\n", line)
        assert m is not None, line
        assert int(m.group(3), 16) == _crc16_by_division(m.group(2))
    assert hello.startswith(b"#HELLO heft-beam/1 fw=hb-0.3.1 ch=2 rate=80 bits=24 sn=X1*")
    assert sample.startswith(b"$1,5,8453,-12877*")  # seq wraps at 65536, t_ms at 2^32
    assert enc.adc_limits(24) == (-8388608, 8388607)


def test_scan_line() -> None:
    assert enc.scan_line("LCW-2611-7I") == b"LCW-2611-7I\r\n"
    assert enc.scan_line("A1", prefix="]C1", suffix="!", terminator=b"\n") == b"]C1A1!\n"
