"""What a driver hands upward: timestamped readings and scanned club tags.

Data flows one way: transport -> driver -> ``Reading`` -> capture engine -> measurement.
A reading is a plain frozen value; nothing below this module knows about the service.
"""

from __future__ import annotations

import enum
import math
import re
from dataclasses import dataclass
from typing import Final


class Flag(enum.Flag):
    """Status a device reports beside its value (empty when the device says nothing)."""

    NONE = 0
    STABLE = enum.auto()  # the device itself declares the value settled
    MOTION = enum.auto()  # the device declares it in motion / dynamic
    OVERLOAD = enum.auto()  # above capacity: the value must never be used as a weight
    UNDERLOAD = enum.auto()  # below the zero range
    AT_ZERO = enum.auto()  # stable at centre of zero
    NET = enum.auto()  # value is net (tared); absent means gross
    FAULT = enum.auto()  # device reports an internal fault
    NEEDS_CALIBRATION = enum.auto()
    NEEDS_ZERO = enum.auto()


DEVICE_NAME_PATTERN = r"^[A-Za-z0-9][A-Za-z0-9_.-]*$"
# No leading zeros in the index: "beam/01" would not read back as the same text.
CHANNEL_PATTERN = rf"^({DEVICE_NAME_PATTERN[1:-1]})/(0|[1-9][0-9]*)$"
_CHANNEL_TEXT = re.compile(CHANNEL_PATTERN)
_DEVICE_NAME = re.compile(DEVICE_NAME_PATTERN)


class ChannelRefError(ValueError):
    """Text that is not a ``<device>/<index>`` channel reference; the message quotes it."""


@dataclass(frozen=True, slots=True, order=True)
class ChannelRef:
    """One channel of one device: ``device`` name and ``index`` (0 for a one-channel scale).

    Its text form ``"<device>/<index>"`` (``"beam/1"``) is what configs, records, events and
    topics carry; :meth:`parse` reads it once and ``str()`` gives the same text back.
    """

    device: str
    index: int

    def __post_init__(self) -> None:
        if not _DEVICE_NAME.match(self.device):
            raise ChannelRefError(
                f"device name {self.device!r} must start with a letter or digit and hold only "
                "letters, digits, '_', '.' and '-'"
            )
        if self.index < 0:
            raise ChannelRefError(f"channel index {self.index} of {self.device!r} is negative")

    @classmethod
    def parse(cls, text: str) -> ChannelRef:
        """``"beam/1"`` -> ChannelRef("beam", 1); raises ChannelRefError naming the text."""
        found = _CHANNEL_TEXT.match(text)
        if found is None:
            raise ChannelRefError(
                f"{text!r} is not a channel reference; expected '<device>/<index>' such as "
                "'beam/0' (a device name, a slash and a channel number)"
            )
        return cls(found[1], int(found[2]))

    def __str__(self) -> str:
        return f"{self.device}/{self.index}"


class ValueKind(enum.Enum):
    """Whether ``Reading.value`` is a mass in grams or raw ADC counts of a load-cell channel."""

    GRAMS = "g"
    COUNTS = "counts"


@dataclass(frozen=True, slots=True)
class Reading:
    """One value from one channel of one device.

    ``value`` is already normalised to grams when ``kind`` is GRAMS (the driver converts oz, lb,
    kg ... through ``heft.drivers.units``); ``device_unit`` keeps what the device actually sent.
    ``t_mono_s`` is the host's monotonic clock on arrival (or the recording's clock in replay).
    """

    device: str
    channel: int
    t_mono_s: float
    value: float
    kind: ValueKind
    device_unit: str
    flags: Flag
    raw: bytes
    seq: int | None = None
    device_time_s: float | None = None

    @property
    def ref(self) -> ChannelRef:
        """The channel this reading came from, as ``<device>/<channel>``."""
        return ChannelRef(self.device, self.channel)

    @property
    def usable(self) -> bool:
        """False for overload, underload and fault frames and for a value that is not finite."""
        # int arithmetic on a precomputed mask: enum Flag operators cost ~1 us a call, and this
        # runs for every reading of every channel
        return not (self.flags.value & _UNUSABLE) and math.isfinite(self.value)


_UNUSABLE: Final = (Flag.OVERLOAD | Flag.UNDERLOAD | Flag.FAULT).value


@dataclass(frozen=True, slots=True)
class ClubTag:
    """A club id read by a barcode/QR scanner (or typed by an operator)."""

    device: str
    t_mono_s: float
    club_id: str
    raw: bytes


@dataclass(frozen=True, slots=True)
class DeviceInfo:
    """Identity a device announced (hello line, USB descriptor, ...), kept with calibrations."""

    device: str
    model: str = ""
    firmware: str = ""
    serial_number: str = ""
    channels: int = 1
    sample_rate_hz: float | None = None
    adc_bits: int | None = None


DriverOutput = Reading | ClubTag | DeviceInfo
