"""A pyusb backend that plays a USB HID scale from data, for tests, the simulator and demos.

The real scale cannot be on a CI machine, so this package stands in for libusb below pyusb's own
``usb.core`` API and behaves as libusb does on Linux, faults included. One job per module:

- ``fixtures``: the JSON fixture format (hardware_fixtures/usb/README.md), validated;
- ``descriptors``: device, configuration, interface, HID and string descriptors;
- ``faults``: the libusb fault state machine (kernel driver, claims, unplug, access);
- ``clock``: the report timeline on a virtual or real clock;
- ``device``: one simulated device answering the host, recording what it did;
- ``backend``: the ``usb.backend.IBackend`` pyusb calls;
- ``reports`` and ``scale``: a simulated scale from weights, with the simulator's own copy of
  the report layout.

The names below are the package's public API (``from heft.drivers.fake_usb import ...``).
"""

from heft.drivers.fake_usb.backend import FakeBackend
from heft.drivers.fake_usb.clock import Pace
from heft.drivers.fake_usb.device import ControlTransfer, FakeUsbDevice
from heft.drivers.fake_usb.fixtures import (
    DEVICE_FORMAT,
    FORMAT_VERSION,
    SEQUENCE_FORMAT,
    ConfigurationSpec,
    DeviceDescriptorSpec,
    EndMode,
    EndpointSpec,
    FixtureError,
    HexBytes,
    HexInt,
    InterfaceSpec,
    ReportEvent,
    ReportSequence,
    UsbDeviceDefinition,
    load_device_definition,
    load_sequence,
)
from heft.drivers.fake_usb.scale import (
    SCALE_REPORT_DESCRIPTOR,
    SIM_PRODUCT_ID,
    SIM_VENDOR_ID,
    fake_scale_backend_from_weights,
    scale_device_definition,
    weight_report,
)

__all__ = [
    "DEVICE_FORMAT",
    "FORMAT_VERSION",
    "SCALE_REPORT_DESCRIPTOR",
    "SEQUENCE_FORMAT",
    "SIM_PRODUCT_ID",
    "SIM_VENDOR_ID",
    "ConfigurationSpec",
    "ControlTransfer",
    "DeviceDescriptorSpec",
    "EndMode",
    "EndpointSpec",
    "FakeBackend",
    "FakeUsbDevice",
    "FixtureError",
    "HexBytes",
    "HexInt",
    "InterfaceSpec",
    "Pace",
    "ReportEvent",
    "ReportSequence",
    "UsbDeviceDefinition",
    "fake_scale_backend_from_weights",
    "load_device_definition",
    "load_sequence",
    "scale_device_definition",
    "weight_report",
]
