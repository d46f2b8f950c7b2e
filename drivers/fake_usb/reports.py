"""The reports a simulated HID point-of-sale scale sends and accepts, written from the documents.

The simulator keeps its own copy of these numbers instead of importing the ``hid_pos`` driver's,
so a wrong constant in the driver shows up as a disagreement in tests rather than being mirrored.
Sources: docs/protocols.md section d and docs/hid.md; the HID Usage Tables, Scales page 0x8D
(status usages 0x71..0x78 are array indices 1..8; unit usages 0x51..0x5C are indices 1..12).

    data report (input, 6 bytes): [0x03, status, unit, exponent (int8), weight LSB, weight MSB]
    control report (output, 2 bytes): [0x02, bit 0 "zero scale" | bit 1 "enforced zero return"]
"""

from __future__ import annotations

import struct
from typing import Final

DATA_REPORT_ID: Final = 0x03
CONTROL_REPORT_ID: Final = 0x02
CONTROL_REPORT_LENGTH: Final = 2
WEIGHT_STEPS_MAX: Final = 0xFFFF  # the weight field is an unsigned 16-bit count of steps

# Status codes (HID Usage Tables, Scales page: 0x71 fault ... 0x78 requires re-zeroing).
STATUS_FAULT: Final = 1
STATUS_STABLE_AT_ZERO: Final = 2
STATUS_IN_MOTION: Final = 3
STATUS_STABLE: Final = 4
STATUS_UNDER_ZERO: Final = 5
STATUS_OVER_WEIGHT: Final = 6
STATUS_NEEDS_CALIBRATION: Final = 7
STATUS_NEEDS_REZERO: Final = 8

STATUS_NAMES: Final[dict[str, int]] = {
    "fault": STATUS_FAULT,
    "zero": STATUS_STABLE_AT_ZERO,
    "motion": STATUS_IN_MOTION,
    "stable": STATUS_STABLE,
    "under": STATUS_UNDER_ZERO,
    "over": STATUS_OVER_WEIGHT,
    "needs_calibration": STATUS_NEEDS_CALIBRATION,
    "needs_zero": STATUS_NEEDS_REZERO,
}
"""Short names for statuses, used by the simulated scale's callers."""

# Unit codes with a fixed mass (HID Usage Tables, Scales page 0x51..0x5C; names as
# heft.drivers.units spells them). 5 (tael) and 9 (avoirdupois ton) are left out: a simulated
# scale never shows them.
UNIT_CODES: Final[dict[str, int]] = {
    "mg": 1, "g": 2, "kg": 3, "ct": 4, "gr": 6, "dwt": 7, "t": 8, "ozt": 10, "oz": 11, "lb": 12,
}

_DATA_REPORT: Final = struct.Struct("<BBBbH")  # id, status, unit, exponent, weight (LE)


def status_code(status: str | int) -> int:
    """A status name (``stable``, ``motion`` ...) or a code 1..8 as the report's status byte.

    Raises:
        ValueError: naming the status and the valid names.
    """
    if isinstance(status, int) and STATUS_FAULT <= status <= STATUS_NEEDS_REZERO:
        return status
    if isinstance(status, str) and status in STATUS_NAMES:
        return STATUS_NAMES[status]
    raise ValueError(f"status {status!r}; expected one of {', '.join(STATUS_NAMES)} "
                     "or a code 1..8")


def unit_code(unit: str) -> int:
    """The report's unit code for ``unit`` (``'g'``, ``'oz'`` ...).

    Raises:
        ValueError: naming the unit and the supported ones.
    """
    if unit not in UNIT_CODES:
        raise ValueError(f"unit {unit!r} has no HID scale unit code; expected one of "
                         f"{', '.join(UNIT_CODES)}")
    return UNIT_CODES[unit]


def data_report(status: int, unit: int, exponent: int, steps: int) -> bytes:
    """A 6-byte data report; raises ``struct.error`` for a field out of its range."""
    return _DATA_REPORT.pack(DATA_REPORT_ID, status, unit, exponent, steps)


def is_control_report(data: bytes) -> bool:
    """True for a report the scale takes as its output (zero) report."""
    return len(data) == CONTROL_REPORT_LENGTH and data[0] == CONTROL_REPORT_ID
