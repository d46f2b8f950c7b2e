"""The driver base classes: bytes in, typed outputs out, bad frames counted and never raised.

A protocol driver is a pure state machine: ``feed(data, t_mono_s)`` takes a chunk of bytes as
they arrived (any split, any size) and returns the readings, club tags and device-info objects
completed by it. It owns no port and no loop, so it is tested with plain bytes.

``Driver`` owns what every protocol shares: option validation (one pydantic model per driver),
statistics, logging of bad frames once per burst, and the guarantee that device bytes never raise.
``LineDriver`` adds text-line framing (CR, LF or CRLF, a maximum line length), so a text protocol
only writes ``parse_line``.

Error hierarchy (everything a caller may catch)::

    DriverError(Exception)
     +-- DriverConfigError(ValueError)   bad driver name or option in the configuration
     |    +-- UnknownDriverError         no driver registered under that name
     +-- UnsupportedCommand(ValueError)  the driver has no such host command (or bad argument)
     +-- FrameError                      internal: one bad frame (never escapes ``feed``)
     +-- TransportError(OSError)         the port is gone or could not be opened
          +-- DeviceSilentError          no bytes for longer than the session allows
"""

from __future__ import annotations

import abc
import logging
import math
import re
from collections import deque
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any, ClassVar, Final

from pydantic import BaseModel, ConfigDict, Field, ValidationError

from heft.drivers import units
from heft.drivers.reading import DriverOutput, Flag, Reading, ValueKind
from heft.drivers.validation import problem_lines

log = logging.getLogger("heft.drivers")

HOST_COMMANDS: Final = ("zero", "tare", "identify", "rate", "reboot")
"""Names accepted by ``Driver.command``; each driver supports a subset."""

# While a burst of bad frames goes on, remind the log at most this often (device clock, seconds).
_BURST_REMINDER_S: Final = 60.0
# Bytes of noise before the first good frame after which we suspect baud rate or protocol.
_NOISE_WARN_BYTES: Final = 1024


class DriverError(Exception):
    """Base of every error the driver layer raises."""


class DriverConfigError(DriverError, ValueError):
    """A driver name or option in the configuration is wrong; the message names which."""


class UnknownDriverError(DriverConfigError):
    """No driver is registered under the configured name; the message lists the valid ones."""


class UnsupportedCommand(DriverError, ValueError):
    """The driver cannot send this host command (or its argument is malformed)."""


class FrameError(DriverError):
    """One frame could not be understood. Raised inside a driver, counted by the base class.

    Args:
        reason: Short human text, e.g. ``"checksum 3A, expected 3B"``.
        noise: True when the bytes are not even an attempt at a frame (boot banner, debug
            print); they are counted as noise bytes rather than frame errors.
    """

    def __init__(self, reason: str, *, noise: bool = False) -> None:
        super().__init__(reason)
        self.reason = reason
        self.noise = noise


class TransportError(DriverError, OSError):
    """The port could not be opened, or was lost while in use."""


class DeviceSilentError(TransportError):
    """The port is open but the device has sent nothing for too long."""


# ASCII digits only: float() and int() would also take other scripts' digits ("\u0663").
_DECIMAL: Final = re.compile(r"[+-]?(?:[0-9]+\.?[0-9]*|\.[0-9]+)")
_INTEGER: Final = re.compile(r"[+-]?[0-9]+")


def parse_decimal(text: str, what: str) -> float:
    """A plain, finite signed decimal (no exponent, nan, inf, ``_``, ``,``) or FrameError.

    A run of digits too long for a float would come back from ``float()`` as infinity; that is a
    corrupt frame, not a weight, so it is refused too.
    """
    if not _DECIMAL.fullmatch(text):
        raise FrameError(f"{what} {text!r} is not a decimal number")
    value = float(text)
    if not math.isfinite(value):
        raise FrameError(f"{what} {text[:20]!r}... ({len(text)} characters) is out of range")
    return value


def parse_int(text: str, what: str, low: int, high: int) -> int:
    """A signed decimal integer within [low, high] or FrameError naming ``what``."""
    if not _INTEGER.fullmatch(text):
        raise FrameError(f"{what} {text!r} is not an integer")
    value = int(text)
    if not low <= value <= high:
        raise FrameError(f"{what} {value} outside {low}..{high}")
    return value


@dataclass(frozen=True, slots=True)
class CommandReply:
    """A device's answer to a host command (zero, tare, identify, rate ...).

    ``command`` is the host command name it answers (``'zero'``, ``'tare'``, ...) or, for a
    reply that cannot be matched, what the device echoed. ``value_g`` carries a tare weight
    when the device reports one.
    """

    device: str
    command: str
    ok: bool
    detail: str
    t_mono_s: float
    raw: bytes
    value_g: float | None = None


@dataclass(slots=True)
class DriverStats:
    """Counters a driver keeps; read them for diagnostics and the dashboard."""

    bytes_in: int = 0
    frames: int = 0  # good frames of any kind (readings, replies, hello, tags)
    readings: int = 0
    frame_errors: int = 0
    noise_bytes: int = 0
    seq_gaps: int = 0  # number of gaps in a device's sequence numbers
    lost_samples: int = 0  # samples missing inside those gaps
    replies: int = 0
    last_error: str = ""


class DriverOptions(BaseModel):
    """Options every driver accepts. Subclasses add their own fields."""

    model_config = ConfigDict(extra="forbid", frozen=True)


class LineOptions(DriverOptions):
    """Options of a text-line driver."""

    max_line_bytes: int = Field(default=256, ge=16, le=65536)
    """A line longer than this without a line end is dropped as a frame error."""


def describe_options_error(err: ValidationError, model: type[BaseModel]) -> str:
    """One readable clause per failing option: its name, what was expected, what was given."""
    return "; ".join(problem_lines(err, model, noun="option", top="(options)"))


class Driver(abc.ABC):
    """Turns the bytes of one device into readings, tags and device info.

    Subclasses set ``name`` and ``Options`` and implement ``_receive``. ``feed`` never raises on
    device bytes: a bad frame raises ``FrameError`` inside ``_receive`` (or is reported with
    ``_bad_frame``) and is counted, logged once per burst and dropped.
    """

    name: ClassVar[str]
    Options: ClassVar[type[DriverOptions]] = DriverOptions
    # Before the first good frame, treat bad frames as noise (a boot banner after DTR reset).
    banner_tolerant: ClassVar[bool] = True

    def __init__(self, device: str, options: Mapping[str, Any] | None = None) -> None:
        self.device = device
        self.options = self._validate_options(dict(options or {}))
        self.stats = DriverStats()
        self._replies: deque[CommandReply] = deque(maxlen=64)
        self._synced = False
        self._in_burst = False
        self._burst_errors = 0
        self._burst_logged_at: float = -math.inf
        self._noise_warned = False
        self._last_unit = "g"  # last unit the device sent, for frames that carry none

    # -- configuration ---------------------------------------------------------------------

    def _validate_options(self, raw: dict[str, Any]) -> DriverOptions:
        model = type(self).Options
        try:
            return model.model_validate(raw)
        except ValidationError as err:
            raise DriverConfigError(f"device {self.device!r} (driver {type(self).name}): "
                                    f"{describe_options_error(err, model)}") from None

    # -- input ---------------------------------------------------------------------------------

    def feed(self, data: bytes, t_mono_s: float) -> list[DriverOutput]:
        """Accept a chunk of device bytes received at ``t_mono_s``; return completed outputs.

        Never raises because of what the bytes contain.
        """
        self.stats.bytes_in += len(data)
        try:
            outputs = self._receive(data, t_mono_s)
        except FrameError as err:  # a driver that frames whole chunks (binary reports)
            self._bad_frame(err, data, t_mono_s)
            return []
        except Exception as err:  # a parser bug must not take the service down; make it loud
            log.exception("device %r: driver %s failed on %d bytes", self.device, self.name,
                          len(data))
            self._bad_frame(FrameError(f"internal parser error: {err!r}"), data, t_mono_s)
            return []
        self.stats.readings += sum(isinstance(o, Reading) for o in outputs)
        return outputs

    @abc.abstractmethod
    def _receive(self, data: bytes, t_mono_s: float) -> list[DriverOutput]:
        """Parse a chunk. Call ``_good_frame``/``_bad_frame`` per frame; may raise FrameError."""

    def reset(self) -> None:
        """Forget partial frames and sync state (the port was just (re)opened)."""
        self._synced = False
        self._in_burst = False
        self._burst_errors = 0
        self._noise_warned = False

    def _good_frame(self, t_mono_s: float) -> None:
        """Record one good frame; ends a burst of bad ones."""
        self.stats.frames += 1
        self._synced = True
        if self._in_burst:
            log.info("device %r: resynchronised after %d bad frame(s)", self.device,
                     self._burst_errors)
            self._in_burst = False
            self._burst_errors = 0

    def _bad_frame(self, err: FrameError, raw: bytes, t_mono_s: float) -> None:
        """Count and (once per burst) log a bad frame or a run of noise."""
        if err.noise or (self.banner_tolerant and not self._synced):
            self.stats.noise_bytes += len(raw)
            if not self._synced and not self._noise_warned and (
                self.stats.noise_bytes >= _NOISE_WARN_BYTES
            ):
                self._noise_warned = True
                log.warning(
                    "device %r: %d bytes received and no valid %s frame yet; check the baud "
                    "rate and the configured protocol", self.device, self.stats.noise_bytes,
                    self.name)
            else:
                log.debug("device %r: ignored %d noise bytes: %r", self.device, len(raw), raw[:80])
            return
        self.stats.frame_errors += 1
        self.stats.last_error = err.reason
        self._burst_errors += 1
        if not self._in_burst or t_mono_s - self._burst_logged_at >= _BURST_REMINDER_S:
            log.warning(
                "device %r: bad %s frame (%s): %r%s", self.device, self.name, err.reason,
                raw[:80], "" if not self._in_burst else f" ({self._burst_errors} in this burst)")
            self._burst_logged_at = t_mono_s
        self._in_burst = True

    def _reply(self, reply: CommandReply) -> None:
        """Queue a command reply for the session (``pop_replies``)."""
        self.stats.replies += 1
        if not reply.ok and reply.command == "?":  # not an answer to a known command
            log.warning("device %r reports an error: %s", self.device, reply.detail)
        elif not reply.ok:
            log.warning("device %r refused %s: %s", self.device, reply.command, reply.detail)
        self._replies.append(reply)

    def pop_replies(self) -> list[CommandReply]:
        """Command replies received since the last call, oldest first."""
        out = list(self._replies)
        self._replies.clear()
        return out

    # -- helpers for subclasses ------------------------------------------------------------

    def _mass_reading(
        self, *, value: float, unit: str, flags: Flag, t_mono_s: float, raw: bytes,
        channel: int = 0,
    ) -> Reading:
        """A GRAMS reading from a value in the device's unit (raises FrameError on bad unit)."""
        try:
            value_g = units.mass_to_g(value, unit) if math.isfinite(value) else value
        except units.UnitError as err:
            raise FrameError(f"unknown unit {unit!r}") from err
        if value_g == 0.0:  # "-0.00 g" is zero: nothing above should show "-0.0 g"
            value_g = 0.0
        return Reading(
            device=self.device, channel=channel, t_mono_s=t_mono_s, value=value_g,
            kind=ValueKind.GRAMS, device_unit=unit, flags=flags, raw=raw,
        )

    def _accept_unit(self, unit: str, allowed: frozenset[str]) -> str:
        """Check a unit field against the protocol's list; remember it as the current unit."""
        if unit not in allowed:
            raise FrameError(f"unit {unit!r} is not one of {', '.join(sorted(allowed))}")
        if unit != self._last_unit:
            log.info("device %r now sends %s (was %s)", self.device, unit, self._last_unit)
        self._last_unit = unit
        return unit

    # -- host to device --------------------------------------------------------------------

    poll_interval_s: float | None = None
    """Seconds between ``poll_request`` writes, or None for a device that sends by itself."""

    def poll_request(self) -> bytes | None:
        """Bytes to send every ``poll_interval_s`` (None: nothing to send)."""
        return None

    def on_open(self) -> bytes | None:
        """Bytes to send right after the port opens (e.g. start continuous output)."""
        return None

    def command(self, name: str, arg: str | None = None) -> bytes:
        """Encode a host command ('zero', 'tare', 'identify', 'rate', 'reboot').

        Raises:
            UnsupportedCommand: naming the driver and the command, when not supported here.
        """
        if name not in HOST_COMMANDS:
            raise UnsupportedCommand(
                f"unknown command {name!r}; expected one of {', '.join(HOST_COMMANDS)}")
        encoded = self._encode_command(name, arg)
        if encoded is None:
            raise UnsupportedCommand(
                f"driver {self.name} (device {self.device!r}) does not support {name!r}")
        return encoded

    def _encode_command(self, name: str, arg: str | None) -> bytes | None:
        """Bytes for a host command, or None when unsupported. Override per driver."""
        return None


class LineDriver(Driver):
    """A driver for a protocol of text lines ended by CR, LF or CRLF.

    The base splits the byte stream into lines (empty lines are skipped), drops over-long lines,
    and calls ``parse_line`` once per complete line with the arrival time of its line end.
    """

    Options: ClassVar[type[DriverOptions]] = LineOptions
    options: LineOptions

    def __init__(self, device: str, options: Mapping[str, Any] | None = None) -> None:
        super().__init__(device, options)
        self._buf = bytearray()
        self._overflowed = False  # inside an over-long line: skip until the next line end

    def reset(self) -> None:
        super().reset()
        self._buf.clear()
        self._overflowed = False

    def _receive(self, data: bytes, t_mono_s: float) -> list[DriverOutput]:
        out: list[DriverOutput] = []
        start = 0
        for i, byte in enumerate(data):
            if byte not in (0x0A, 0x0D):
                continue
            self._buf += data[start:i]
            start = i + 1
            self._end_of_line(t_mono_s, out)
        self._buf += data[start:]
        if self._overflowed:  # still inside a line already dropped and counted: discard
            self._buf.clear()
        elif len(self._buf) > self.options.max_line_bytes:
            self._bad_frame(
                FrameError(f"line longer than {self.options.max_line_bytes} bytes"),
                bytes(self._buf[:80]), t_mono_s)
            self._buf.clear()
            self._overflowed = True
        return out

    def _end_of_line(self, t_mono_s: float, out: list[DriverOutput]) -> None:
        line = bytes(self._buf)
        self._buf.clear()
        if self._overflowed:  # the tail of a line already dropped
            self._overflowed = False
            return
        if not line.strip():
            return
        if len(line) > self.options.max_line_bytes:
            self._bad_frame(
                FrameError(f"line longer than {self.options.max_line_bytes} bytes"), line[:80],
                t_mono_s)
            return
        try:
            produced = self.parse_line(line, t_mono_s)
        except FrameError as err:
            self._bad_frame(err, line, t_mono_s)
            return
        except Exception as err:  # parser bug: count it, keep the service alive
            log.exception("device %r: driver %s failed on line %r", self.device, self.name, line)
            self._bad_frame(FrameError(f"internal parser error: {err!r}"), line, t_mono_s)
            return
        self._good_frame(t_mono_s)
        out.extend(produced)

    @abc.abstractmethod
    def parse_line(self, line: bytes, t_mono_s: float) -> list[DriverOutput]:
        """Turn one complete line (without its line end) into outputs; raise FrameError if bad."""

    @staticmethod
    def _text(line: bytes) -> str:
        """Decode a line as printable ASCII (tabs allowed) or raise FrameError."""
        try:
            text = line.decode("ascii")
        except UnicodeDecodeError:
            raise FrameError("non-ASCII bytes in line") from None
        if not text.replace("\t", " ").isprintable():
            raise FrameError("control characters in line")
        return text
