"""The pyusb backend over simulated devices: ``usb.core.find(backend=FakeBackend(...))``.

It stands in for libusb below pyusb's own ``usb.core`` API, so ``usb.core.find`` returns a real
``usb.core.Device`` whose descriptors, strings, transfers and kernel-driver calls land on a
``FakeUsbDevice``.
"""

from __future__ import annotations

import array
import errno
from collections.abc import Iterable
from pathlib import Path

import usb.backend

from heft.drivers.fake_usb import descriptors
from heft.drivers.fake_usb.clock import Pace
from heft.drivers.fake_usb.device import FakeUsbDevice, _Handle
from heft.drivers.fake_usb.faults import usb_error
from heft.drivers.fake_usb.fixtures import load_sequence


class FakeBackend(usb.backend.IBackend):  # type: ignore[misc]  # pyusb is untyped
    """A ``usb.backend.IBackend`` over simulated devices; pass it to ``usb.core.find``."""

    def __init__(self, devices: FakeUsbDevice | Iterable[FakeUsbDevice]) -> None:
        super().__init__()
        self.devices: list[FakeUsbDevice] = (
            [devices] if isinstance(devices, FakeUsbDevice) else list(devices))

    @classmethod
    def from_fixture(cls, sequence_path: Path, *,
                     pace: Pace = "virtual") -> FakeBackend:
        """A backend with the one device and report sequence of a fixture file."""
        definition, sequence = load_sequence(sequence_path)
        return cls(FakeUsbDevice(
            definition, sequence.events, end=sequence.end,
            hold_interval_s=sequence.hold_interval_s, pace=pace,
            kernel_driver_active=sequence.kernel_driver_active))

    @property
    def device(self) -> FakeUsbDevice:
        """The first (usually only) device."""
        return self.devices[0]

    # The IBackend interface (names and arguments as pyusb calls them).

    def enumerate_devices(self) -> list[FakeUsbDevice]:
        return [d for d in self.devices if not d.unplugged]

    def get_parent(self, dev: FakeUsbDevice) -> None:
        return None

    def get_device_descriptor(self, dev: FakeUsbDevice) -> descriptors.DeviceDescriptor:
        return descriptors.device_descriptor(dev.definition)

    def get_configuration_descriptor(self, dev: FakeUsbDevice,
                                     config: int) -> descriptors.ConfigDescriptor:
        if config != 0:
            raise IndexError(f"invalid configuration index {config}")
        return descriptors.config_descriptor(dev.definition)

    def get_interface_descriptor(self, dev: FakeUsbDevice, intf: int, alt: int,
                                 config: int) -> descriptors.InterfaceDescriptor:
        if config != 0 or intf != 0 or alt != 0:
            raise IndexError(f"invalid interface index {intf}/{alt}")
        return descriptors.interface_descriptor(dev.definition)

    def get_endpoint_descriptor(self, dev: FakeUsbDevice, ep: int, intf: int, alt: int,
                                config: int) -> descriptors.EndpointDescriptor:
        self.get_interface_descriptor(dev, intf, alt, config)
        if not 0 <= ep < len(dev.definition.interface.endpoints):
            raise IndexError(f"invalid endpoint index {ep}")
        return descriptors.endpoint_descriptor(dev.definition, ep)

    def open_device(self, dev: FakeUsbDevice) -> _Handle:
        return dev.open()

    def close_device(self, dev_handle: _Handle) -> None:
        dev_handle.device.close(dev_handle)

    def set_configuration(self, dev_handle: _Handle, config_value: int) -> None:
        dev_handle.device.set_configuration(dev_handle, config_value)

    def get_configuration(self, dev_handle: _Handle) -> int:
        return dev_handle.device.get_configuration(dev_handle)

    def set_interface_altsetting(self, dev_handle: _Handle, intf: int, altsetting: int) -> None:
        dev_handle.device.handle_ok(dev_handle)
        if altsetting != 0:
            raise usb_error(errno.ENOENT, f"no alternate setting {altsetting}")

    def claim_interface(self, dev_handle: _Handle, intf: int) -> None:
        dev_handle.device.claim(dev_handle, intf)

    def release_interface(self, dev_handle: _Handle, intf: int) -> None:
        dev_handle.device.release(dev_handle, intf)

    def intr_read(self, dev_handle: _Handle, ep: int, intf: int, buff: array.array[int],
                  timeout: int) -> int:
        return dev_handle.device.interrupt_read(dev_handle, ep, intf, buff, timeout)

    def intr_write(self, dev_handle: _Handle, ep: int, intf: int, data: array.array[int],
                   timeout: int) -> int:
        return dev_handle.device.interrupt_write(dev_handle, ep, intf, data.tobytes())

    def ctrl_transfer(self, dev_handle: _Handle, bmRequestType: int, bRequest: int, wValue: int,
                      wIndex: int, data: array.array[int], timeout: int) -> int:
        return dev_handle.device.control(dev_handle, bmRequestType, bRequest, wValue, wIndex, data)

    def clear_halt(self, dev_handle: _Handle, ep: int) -> None:
        dev_handle.device.handle_ok(dev_handle)

    def reset_device(self, dev_handle: _Handle) -> None:
        dev_handle.device.handle_ok(dev_handle)

    def is_kernel_driver_active(self, dev_handle: _Handle, intf: int) -> bool:
        return dev_handle.device.is_kernel_driver_active(dev_handle, intf)

    def detach_kernel_driver(self, dev_handle: _Handle, intf: int) -> None:
        dev_handle.device.detach_kernel_driver(dev_handle, intf)

    def attach_kernel_driver(self, dev_handle: _Handle, intf: int) -> None:
        dev_handle.device.attach_kernel_driver(dev_handle, intf)
