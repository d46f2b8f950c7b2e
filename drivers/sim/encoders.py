"""Frames exactly as docs/protocols.md specifies them: value and state in, bytes out.

Pure functions, no state: the simulated devices decide *what* to say, these decide *how* it looks
on the wire. Values arrive already rounded to the display step; ``decimals`` says how many digits
the display shows.
"""

from __future__ import annotations

from decimal import Decimal
from typing import Final

CRLF = b"\r\n"
LF = b"\n"

# --- shared -----------------------------------------------------------------------------------


def decimals_for_step(step: float) -> int:
    """Digits after the point a display with this step shows (0.01 -> 2, 0.05 -> 2, 1 -> 0)."""
    if not step > 0:
        raise ValueError(f"display step must be > 0, got {step}")
    exponent = Decimal(repr(step)).normalize().as_tuple().exponent
    assert isinstance(exponent, int)
    return max(0, -exponent)


def format_value(value: float, decimals: int) -> str:
    """Signed decimal with a fixed number of decimals (``-0.00`` is written ``0.00``)."""
    text = f"{value:.{decimals}f}"
    return text[1:] if text.startswith("-") and float(text) == 0 else text


# --- a. poll command set --------------------------------------------------------------------


def poll_weight(value: float, unit: str, *, stable: bool, decimals: int, cmd: str = "S") -> bytes:
    """``S S     123.45 g``: the value right-aligned in a 10-character field."""
    state = "S" if stable else "D"
    return f"{cmd} {state} {format_value(value, decimals):>10} {unit}".encode("ascii") + CRLF


def poll_status(cmd: str, status: str) -> bytes:
    """A reply with no value: ``S I``, ``S +``, ``S -``, ``Z A``, ``Z I``, ``T I`` ..."""
    return f"{cmd} {status}".encode("ascii") + CRLF


def poll_reset(serial_number: str) -> bytes:
    """Reply to ``@``: ``I4 A "<serial number>"``."""
    return f'I4 A "{serial_number}"'.encode("ascii") + CRLF


def poll_error(code: str = "ES") -> bytes:
    """``ES`` syntax, ``ET`` transmission, ``EL`` logical error."""
    if code not in ("ES", "ET", "EL"):
        raise ValueError(f"unknown poll error code {code!r}")
    return code.encode("ascii") + CRLF


# --- b. continuous output -------------------------------------------------------------------

STREAM_OVERLOAD_VALUE = "+9999999"


def stream_line(
    value: float | None,
    unit: str,
    *,
    stable: bool,
    net: bool,
    decimals: int,
    overload: bool = False,
    tare: bool = False,
) -> bytes:
    """``ST,GS,+00123.45   g``: header, header, sign + 8 characters, unit right-aligned in 4."""
    if overload:
        h1, field = "OL", STREAM_OVERLOAD_VALUE
    else:
        if value is None:
            raise ValueError("a value is required unless overload")
        h1 = "ST" if stable else "US"
        text = format_value(value, decimals)
        sign = "-" if text.startswith("-") else "+"
        digits = text.lstrip("-")
        if len(digits) > 8:
            raise ValueError(f"value {value} does not fit the 8-character field")
        field = sign + digits.zfill(8)
    h2 = "TR" if tare else ("NT" if net else "GS")
    return f"{h1},{h2},{field}{unit:>4}".encode("ascii") + CRLF


# --- c. generic line ------------------------------------------------------------------------


def template_line(
    template: str,
    value: float,
    unit: str,
    stable_text: str,
    *,
    decimals: int,
    terminator: bytes = CRLF,
) -> bytes:
    """Fill a ``str.format`` template with ``{value}`` (text), ``{unit}`` and ``{stable}``."""
    line = template.format(value=format_value(value, decimals), unit=unit, stable=stable_text)
    return line.encode("ascii") + terminator


# --- e. heft beam protocol v1 ---------------------------------------------------------------

BEAM_PROTOCOL = "heft-beam/1"

# CRC-16/CCITT-FALSE, as the README's beam protocol section specifies it: polynomial 0x1021,
# initial value 0xFFFF, no reflection, no final XOR (CRC catalogue check value 0x29B1 for
# b"123456789"). Computed here bit by bit rather than taken from the host's parser, so a wrong
# parameter on either side shows up as a disagreement in the tests instead of being mirrored.
_CRC16_POLY: Final = 0x1021
_CRC16_INIT: Final = 0xFFFF


def crc16_ccitt_false(data: bytes) -> int:
    """CRC-16/CCITT-FALSE of ``data``, most significant bit first."""
    crc = _CRC16_INIT
    for byte in data:
        crc ^= byte << 8
        for _ in range(8):
            crc = ((crc << 1) ^ _CRC16_POLY) if crc & 0x8000 else crc << 1
            crc &= 0xFFFF
    return crc


def beam_line(lead: str, body: str) -> bytes:
    """``<lead><body>*HHHH\\n``: the CRC-16 check in four upper-case hex digits."""
    if lead not in ("#", "$"):
        raise ValueError(f"beam lines start with '#' or '$', not {lead!r}")
    raw = body.encode("ascii")
    return lead.encode("ascii") + raw + b"*" + f"{crc16_ccitt_false(raw):04X}".encode("ascii") + LF


def beam_hello(*, firmware: str, channels: int, rate_hz: int, bits: int, serial: str) -> bytes:
    return beam_line(
        "#",
        f"HELLO {BEAM_PROTOCOL} fw={firmware} ch={channels} rate={rate_hz} bits={bits} "
        f"sn={serial}",
    )


def beam_sample(seq: int, t_ms: int, counts: list[int]) -> bytes:
    """``$<seq>,<t_ms>,<c0>[,<c1>...]*HHHH``; seq wraps at 65536, t_ms at 2^32."""
    fields = [str(seq % 65536), str(t_ms % 2**32), *(str(c) for c in counts)]
    return beam_line("$", ",".join(fields))


def beam_ok(echo: str) -> bytes:
    return beam_line("#", f"OK {echo}")


def beam_err(message: str) -> bytes:
    return beam_line("#", f"ERR {message}")


def adc_limits(bits: int) -> tuple[int, int]:
    """Lowest and highest ADC code; either one means saturated (OVERLOAD)."""
    return -(2 ** (bits - 1)), 2 ** (bits - 1) - 1


# --- f. scanner -----------------------------------------------------------------------------


def scan_line(
    club_id: str, *, prefix: str = "", suffix: str = "", terminator: bytes = CRLF
) -> bytes:
    return f"{prefix}{club_id}{suffix}".encode("ascii") + terminator
