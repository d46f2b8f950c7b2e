"""heft beam protocol, version 1 (docs/protocols.md section e, driver ``beam``).

DIY load-cell rigs: HX711-style ADCs behind a microcontroller. Every device line is
``#...*HHHH`` or ``$...*HHHH`` with a CRC-16/CCITT-FALSE check; a line with a wrong, missing
or old two-digit check is dropped and counted, so a corrupt sample never becomes a reading. Lines
starting with anything else (boot banners, debug prints) are noise. Samples become one
``Reading`` per channel in raw ADC counts (``ValueKind.COUNTS``); calibration to grams happens
above the driver.
"""

from __future__ import annotations

import binascii
import logging
import re
from collections.abc import Mapping
from typing import Any, ClassVar, Final

from pydantic import Field

from heft.drivers.base import (
    CommandReply,
    FrameError,
    LineDriver,
    LineOptions,
    UnsupportedCommand,
    parse_int,
)
from heft.drivers.reading import DeviceInfo, DriverOutput, Flag, Reading, ValueKind

log = logging.getLogger("heft.drivers")

PROTOCOL_NAME: Final = "heft-beam"
PROTOCOL_MAJOR: Final = 1
SEQ_MODULO: Final = 65536
T_MS_MODULO: Final = 2**32
# Lead, body (printable ASCII without '*'), then whatever follows the '*' (checked below, so a
# lower-case or two-digit check gets its own message).
_FRAMED: Final = re.compile(rb"([#$])([\x20-\x29\x2b-\x7e]*)\*([\x20-\x7e]*)")
_CHECK_DIGITS: Final = re.compile(rb"[0-9A-F]{4}")
CRC16_INIT: Final = 0xFFFF
_HELLO_VERSION: Final = re.compile(r"heft-beam/(\d+)(?:\.(\d+))?")
_HELLO_REQUIRED: Final = ("fw", "ch", "rate", "bits")
_RATE_ARG: Final = re.compile(r"[0-9]{1,6}")  # ASCII only: str.isdigit() also takes "\u00b2"
_COMMAND_ECHOES: Final = {"ID": "identify", "RATE": "rate", "REBOOT": "reboot"}


def checksum(body: bytes) -> int:
    """CRC-16/CCITT-FALSE of ``body`` (the part between the lead character and ``*``).

    Poly 0x1021, init 0xFFFF, no reflection, no final xor: ``binascii.crc_hqx`` with init 0xFFFF.
    The firmware's ``framing.checksum`` computes the same bit by bit (MicroPython lacks crc_hqx).
    """
    return binascii.crc_hqx(body, CRC16_INIT)


class BeamOptions(LineOptions):
    adc_bits: int = Field(default=24, ge=8, le=32)
    """ADC resolution assumed until the device's HELLO says otherwise (saturation detection)."""


class BeamDriver(LineDriver):
    """Samples, hello and command replies of a heft beam."""

    name: ClassVar[str] = "beam"
    Options: ClassVar[type[LineOptions]] = BeamOptions
    options: BeamOptions
    banner_tolerant: ClassVar[bool] = False  # noise is recognised by its lead character

    def __init__(self, device: str, options: Mapping[str, Any] | None = None) -> None:
        super().__init__(device, options)
        self.info: DeviceInfo | None = None
        self.refused: str | None = None  # set when the device speaks another major version
        self._bits = self.options.adc_bits
        self._channels: int | None = None
        self._last_seq: int | None = None
        self._last_t_ms: int | None = None
        self._t_wraps = 0

    def reset(self) -> None:
        super().reset()
        self._restart_sequence()

    def _restart_sequence(self) -> None:
        self._last_seq = None
        self._last_t_ms = None
        self._t_wraps = 0

    # -- host to device --------------------------------------------------------------------

    def on_open(self) -> bytes | None:
        # The board may not reset when the port opens (no DTR wiring): ask for the HELLO.
        return b"!ID\n"

    def _encode_command(self, name: str, arg: str | None) -> bytes | None:
        if name == "identify":
            return b"!ID\n"
        if name == "reboot":
            return b"!REBOOT\n"
        if name == "rate":
            if arg is None or not _RATE_ARG.fullmatch(arg.strip()) or int(arg) <= 0:
                raise UnsupportedCommand(
                    f"driver beam (device {self.device!r}): 'rate' needs a positive whole "
                    f"number of samples per second, got {arg!r}")
            return f"!RATE {int(arg)}\n".encode("ascii")
        return None

    # -- device to host --------------------------------------------------------------------

    def parse_line(self, line: bytes, t_mono_s: float) -> list[DriverOutput]:
        line = line.strip()
        if line[:1] not in (b"#", b"$"):
            raise FrameError("not a beam line", noise=True)
        m = _FRAMED.fullmatch(line)
        if m is None:
            raise FrameError("no '*HHHH' checksum or bytes outside printable ASCII")
        lead, body, digits = m.group(1), m.group(2), m.group(3)
        if not _CHECK_DIGITS.fullmatch(digits):
            if _CHECK_DIGITS.fullmatch(digits.upper()):
                raise FrameError(f"checksum {digits.decode()!r} must be upper-case hex")
            raise FrameError(
                f"checksum must be 4 hex digits (CRC-16), got {digits[:8].decode()!r}")
        sent, computed = int(digits, 16), checksum(body)
        if computed != sent:
            raise FrameError(f"checksum {sent:04X}, computed {computed:04X}")
        text = body.decode("ascii")
        if lead == b"$":
            return self._sample(text, line, t_mono_s)
        keyword, _, rest = text.partition(" ")
        if keyword == "HELLO":
            return self._hello(rest, t_mono_s)
        if keyword in ("OK", "ERR"):
            first = rest.split(" ", 1)[0].upper()
            command = _COMMAND_ECHOES.get(first, first.lower() if keyword == "OK" else "?")
            self._reply(CommandReply(self.device, command, keyword == "OK", rest, t_mono_s, line))
            return []
        raise FrameError(f"unknown message #{keyword}")

    def _hello(self, rest: str, t_mono_s: float) -> list[DriverOutput]:
        words = rest.split()
        if not words:
            raise FrameError("HELLO without protocol version")
        version = _HELLO_VERSION.fullmatch(words[0])
        if version is None:
            raise FrameError(f"HELLO names protocol {words[0]!r}, expected heft-beam/<major>")
        major = int(version.group(1))
        if major != PROTOCOL_MAJOR:
            self.refused = (
                f"device {self.device!r} speaks {words[0]}, this heft speaks "
                f"{PROTOCOL_NAME}/{PROTOCOL_MAJOR}: its samples are ignored. Update heft or "
                f"flash firmware for {PROTOCOL_NAME}/{PROTOCOL_MAJOR}.")
            log.error("%s", self.refused)
            return []
        fields: dict[str, str] = {}
        for word in words[1:]:
            key, sep, value = word.partition("=")
            if not sep:
                raise FrameError(f"HELLO field {word!r} is not key=value")
            fields[key] = value
        missing = [k for k in _HELLO_REQUIRED if k not in fields]
        if missing:
            raise FrameError(f"HELLO lacks {', '.join(missing)}")
        channels = parse_int(fields["ch"], "ch", 1, 16)
        rate = parse_int(fields["rate"], "rate", 1, 100000)
        bits = parse_int(fields["bits"], "bits", 8, 32)
        self.refused = None
        self._channels, self._bits = channels, bits
        self._restart_sequence()  # boot, rate change or !ID: sequence numbers start afresh
        self.info = DeviceInfo(
            device=self.device, model=f"{PROTOCOL_NAME}/{major}", firmware=fields["fw"],
            serial_number=fields.get("sn", ""), channels=channels, sample_rate_hz=float(rate),
            adc_bits=bits)
        return [self.info]

    def _sample(self, text: str, line: bytes, t_mono_s: float) -> list[DriverOutput]:
        if self.refused is not None:
            raise FrameError("sample from a device of an unsupported protocol version")
        fields = text.split(",")
        if len(fields) < 3:
            raise FrameError("sample needs seq, t_ms and at least one channel")
        seq = parse_int(fields[0], "seq", 0, SEQ_MODULO - 1)
        t_ms = parse_int(fields[1], "t_ms", 0, T_MS_MODULO - 1)
        low, high = -(2 ** (self._bits - 1)), 2 ** (self._bits - 1) - 1
        counts = [parse_int(f, f"channel {i}", low, high) for i, f in enumerate(fields[2:])]
        if self._channels is not None and len(counts) != self._channels:
            raise FrameError(f"{len(counts)} channels in a sample, HELLO announced "
                             f"{self._channels}")
        device_time_s = self._unwrap_time(t_ms)
        self._track_seq(seq)
        return [
            Reading(device=self.device, channel=i, t_mono_s=t_mono_s, value=float(c),
                    kind=ValueKind.COUNTS, device_unit="counts",
                    flags=Flag.OVERLOAD if c in (low, high) else Flag.NONE, raw=line, seq=seq,
                    device_time_s=device_time_s)
            for i, c in enumerate(counts)
        ]

    def _track_seq(self, seq: int) -> None:
        if self._last_seq is not None:
            missing = (seq - self._last_seq - 1) % SEQ_MODULO
            if missing >= SEQ_MODULO // 2:
                # Backwards: the board restarted and its HELLO was lost. Nothing to count as lost.
                self.stats.seq_gaps += 1
                log.info("device %r: sequence restarted at %d", self.device, seq)
            elif missing:
                self.stats.seq_gaps += 1
                self.stats.lost_samples += missing
                log.info("device %r: %d sample(s) lost before seq %d", self.device, missing, seq)
        self._last_seq = seq

    def _unwrap_time(self, t_ms: int) -> float:
        """Device time in seconds, continuous across the 2^32 ms wrap of the device clock."""
        if self._last_t_ms is not None and t_ms < self._last_t_ms - T_MS_MODULO // 2:
            self._t_wraps += 1
        self._last_t_ms = t_ms
        return (self._t_wraps * T_MS_MODULO + t_ms) / 1000.0
