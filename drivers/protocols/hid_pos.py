"""USB HID point-of-sale scales (HID usage page 0x8D, "Scales"): data reports to readings.

Wire format: docs/protocols.md section d. The transport (drivers/usb_transport.py) hands over one
whole input report per ``feed`` call, so this driver does no framing: a report is either a valid
6-byte data report or a frame error.

    [report_id=0x03, status, unit, exponent (int8), weight LSB, weight MSB]

weight = uint16 * 10**exponent, in the unit the unit code names.
"""

from __future__ import annotations

import enum
import struct
from dataclasses import dataclass
from typing import ClassVar, Final

from heft.drivers.base import Driver, FrameError
from heft.drivers.reading import DriverOutput, Flag

DATA_REPORT_ID: Final = 0x03
CONTROL_REPORT_ID: Final = 0x02
DATA_REPORT_LENGTH: Final = 6
ZERO_SCALE_BIT: Final = 0x01  # control report byte 1, usage 0x80 "Zero Scale"
ENFORCED_ZERO_RETURN_BIT: Final = 0x02  # usage 0x81

_DATA_REPORT: Final = struct.Struct("<BBBbH")  # id, status, unit, exponent, weight


class ScaleStatus(enum.IntEnum):
    """Status byte of the data report (array index into usages 0x71..0x78)."""

    FAULT = 1
    STABLE_AT_ZERO = 2
    IN_MOTION = 3
    STABLE = 4
    UNDER_ZERO = 5
    OVER_WEIGHT = 6
    NEEDS_CALIBRATION = 7
    NEEDS_REZERO = 8


STATUS_FLAGS: Final[dict[ScaleStatus, Flag]] = {
    ScaleStatus.FAULT: Flag.FAULT,
    ScaleStatus.STABLE_AT_ZERO: Flag.STABLE | Flag.AT_ZERO,
    ScaleStatus.IN_MOTION: Flag.MOTION,
    ScaleStatus.STABLE: Flag.STABLE,
    ScaleStatus.UNDER_ZERO: Flag.UNDERLOAD,
    ScaleStatus.OVER_WEIGHT: Flag.OVERLOAD,
    ScaleStatus.NEEDS_CALIBRATION: Flag.NEEDS_CALIBRATION,
    ScaleStatus.NEEDS_REZERO: Flag.NEEDS_ZERO,
}

UNIT_CODES: Final[dict[int, str]] = {
    1: "mg",
    2: "g",
    3: "kg",
    4: "ct",
    6: "gr",
    7: "dwt",
    8: "t",
    10: "ozt",
    11: "oz",
    12: "lb",
}
"""Unit codes heft converts (names as heft.drivers.units knows them)."""

AMBIGUOUS_UNIT_CODES: Final[dict[int, str]] = {
    5: "tael (its mass differs by region)",
    9: "avoirdupois ton (short or long ton is not said)",
}
"""Unit codes defined by the usage tables whose mass heft will not guess."""

@dataclass(frozen=True, slots=True)
class ScaleDataReport:
    """One decoded data report, still in the device's unit."""

    status: ScaleStatus
    unit_code: int
    exponent: int
    raw_weight: int

    @property
    def device_unit(self) -> str:
        return UNIT_CODES[self.unit_code]

    @property
    def value(self) -> float:
        """The weight in ``device_unit`` (divide rather than multiply by 10**-n: 137/10 == 13.7)."""
        if self.exponent < 0:
            divisor: int = 10 ** (-self.exponent)
            return self.raw_weight / divisor
        factor: int = 10**self.exponent
        return float(self.raw_weight * factor)

    @property
    def flags(self) -> Flag:
        return STATUS_FLAGS[self.status]


def decode_data_report(report: bytes) -> ScaleDataReport:
    """Decode one whole input report.

    Raises:
        FrameError: wrong length, unknown report id, status or unit code (reason says which).
    """
    if len(report) != DATA_REPORT_LENGTH:
        raise FrameError(f"report of {len(report)} bytes, expected {DATA_REPORT_LENGTH}")
    report_id, status, unit_code, exponent, raw_weight = _DATA_REPORT.unpack(report)
    if report_id != DATA_REPORT_ID:
        raise FrameError(f"report id 0x{report_id:02X}, expected 0x{DATA_REPORT_ID:02X}")
    try:
        scale_status = ScaleStatus(status)
    except ValueError:
        raise FrameError(f"status {status}, expected 1..8") from None
    if unit_code in AMBIGUOUS_UNIT_CODES:
        raise FrameError(f"unit code {unit_code} = {AMBIGUOUS_UNIT_CODES[unit_code]}; set the "
                         "scale to g, oz or another unit of fixed mass")
    if unit_code not in UNIT_CODES:
        raise FrameError(f"unit code {unit_code}, expected 1..12")
    return ScaleDataReport(scale_status, unit_code, exponent, raw_weight)


def control_report(*, zero: bool = True, enforced_zero_return: bool = False) -> bytes:
    """The output (control) report: id 0x02 then the zero bits."""
    bits = (ZERO_SCALE_BIT if zero else 0) | (
        ENFORCED_ZERO_RETURN_BIT if enforced_zero_return else 0)
    return bytes((CONTROL_REPORT_ID, bits))


class HidPosDriver(Driver):
    """Driver ``hid_pos``: one HID POS scale data report per ``feed`` call -> one reading.

    Every status becomes a reading carrying its flag (fault, over and under are marked unusable
    by ``Reading.usable``); bytes that are not a valid data report are frame errors.
    """

    name: ClassVar[str] = "hid_pos"
    # A USB report never carries a boot banner: bad reports count as errors from the first one.
    banner_tolerant: ClassVar[bool] = False

    def _receive(self, data: bytes, t_mono_s: float) -> list[DriverOutput]:
        report = decode_data_report(data)
        reading = self._mass_reading(value=report.value, unit=report.device_unit,
                                     flags=report.flags, t_mono_s=t_mono_s, raw=bytes(data))
        self._good_frame(t_mono_s)
        return [reading]

    def _encode_command(self, name: str, arg: str | None) -> bytes | None:
        if name == "zero":
            return control_report(zero=True)
        return None
