"""A simulated HID scale from weights over time (simulator, demo): definition and reports.

``fake_scale_backend_from_weights`` turns ``(t_s, weight_g, status)`` samples into a backend
whose one device sends the data reports a scale showing those weights would send. The report
layout and codes are the simulator's own copies (``reports``), written from the documents.
"""

from __future__ import annotations

from collections.abc import Iterable
from typing import Final

from heft.drivers import units
from heft.drivers.fake_usb.backend import FakeBackend
from heft.drivers.fake_usb.clock import Pace
from heft.drivers.fake_usb.device import FakeUsbDevice
from heft.drivers.fake_usb.fixtures import (
    DEVICE_FORMAT,
    FORMAT_VERSION,
    EndMode,
    ReportEvent,
    UsbDeviceDefinition,
)
from heft.drivers.fake_usb.reports import (
    STATUS_OVER_WEIGHT,
    STATUS_UNDER_ZERO,
    WEIGHT_STEPS_MAX,
    data_report,
    status_code,
    unit_code,
)

SIM_VENDOR_ID: Final = 0x1209  # pid.codes, the open-source vendor id
SIM_PRODUCT_ID: Final = 0x0001  # pid.codes test PID: never ship hardware with it

# Report descriptor of the simulated scale: usage page 0x8D, control report 2 (zero scale,
# enforced zero return) and data report 3 (status, unit, exponent, weight) as in
# docs/protocols.md d. Item by item in docs/hid.md.
SCALE_REPORT_DESCRIPTOR: Final = bytes.fromhex(
    "05 8d 09 20 a1 01"
    " 85 02 09 31 a1 02 09 80 09 81 15 00 25 01 75 01 95 02 91 02 75 06 95 01 91 03 c0"
    " 85 03 09 32 a1 02 19 71 29 78 15 01 25 08 75 08 95 01 81 00"
    " 19 51 29 5c 15 01 25 0c 81 00 09 41 15 80 25 7f 81 02"
    " 09 40 15 00 27 ff ff 00 00 75 10 81 02 c0 c0")


def scale_device_definition(*, vid: int = SIM_VENDOR_ID, pid: int = SIM_PRODUCT_ID,
                            serial: str = "SIM-0001",
                            product: str = "heft simulated HID scale",
                            kernel_driver_active: bool = True) -> UsbDeviceDefinition:
    """A HID POS scale definition with one interrupt IN endpoint (zero via SET_REPORT)."""
    return UsbDeviceDefinition.model_validate({
        "format": DEVICE_FORMAT, "version": FORMAT_VERSION, "name": "heft-sim-scale",
        "device": {"idVendor": vid, "idProduct": pid, "manufacturer": "heft simulator",
                   "product": product, "serial_number": serial},
        "interface": {"report_descriptor": SCALE_REPORT_DESCRIPTOR,
                      "endpoints": [{"bEndpointAddress": 0x81, "wMaxPacketSize": 8}]},
        "kernel_driver_active": kernel_driver_active,
    })


def weight_report(weight_g: float, status: str | int = "stable", *, unit: str = "g",
                  exponent: int = -1) -> bytes:
    """The data report a scale sends for ``weight_g`` shown in ``unit`` with ``exponent``.

    The report's weight is unsigned: a negative weight is sent as 0 with status under zero,
    one beyond 65535 steps as 65535 with status over weight.
    """
    code = status_code(status)
    unit_id = unit_code(unit)
    steps = round(units.g_to_mass(weight_g, unit) / 10.0**exponent)
    if steps < 0:
        steps, code = 0, STATUS_UNDER_ZERO
    elif steps > WEIGHT_STEPS_MAX:
        steps, code = WEIGHT_STEPS_MAX, STATUS_OVER_WEIGHT
    return data_report(code, unit_id, exponent, steps)


def fake_scale_backend_from_weights(
    samples: Iterable[tuple[float, float, str | int]],
    *,
    unit: str = "g",
    exponent: int = -1,
    vid: int = SIM_VENDOR_ID,
    pid: int = SIM_PRODUCT_ID,
    serial: str = "SIM-0001",
    end: EndMode = "hold",
    hold_interval_s: float = 0.2,
    pace: Pace = "realtime",
    kernel_driver_active: bool = True,
) -> FakeBackend:
    """A backend with one simulated HID scale sending ``(t_s, weight_g, status)`` samples.

    ``status`` is a name (``stable``, ``motion``, ``zero``, ``under``, ``over``, ``fault``,
    ``needs_calibration``, ``needs_zero``) or a code 1..8. Open it through the real pyusb path:
    ``UsbHidTransport(vid, pid, backend=backend)``.
    """
    events = [ReportEvent(t=t_s, rx=weight_report(w_g, status, unit=unit, exponent=exponent))
              for t_s, w_g, status in samples]
    definition = scale_device_definition(vid=vid, pid=pid, serial=serial,
                                         kernel_driver_active=kernel_driver_active)
    return FakeBackend(FakeUsbDevice(definition, events, end=end,
                                     hold_interval_s=hold_interval_s, pace=pace))
