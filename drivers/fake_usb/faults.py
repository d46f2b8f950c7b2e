"""What libusb on Linux refuses, and when: the ownership and cable state of one simulated device.

- the kernel's HID driver is bound at start: claiming the interface or setting the configuration
  fails with EBUSY until it is detached, and re-attaching fails while the interface is claimed;
- after an unplug every call raises ``USBError`` with errno ENODEV;
- an ``access_denied`` device refuses to open (EACCES).

The errors carry libusb's own codes and texts, so they read as they would from the real backend.
The caller (``FakeUsbDevice``) holds its lock around every call here.
"""

from __future__ import annotations

import errno
import threading
from typing import Final

import usb.core

# libusb error codes and strerror texts, so errors read as they would from the real backend.
_LIBUSB_ERRORS: Final[dict[int, tuple[int, str]]] = {
    errno.EIO: (-1, "Input/Output Error"),
    errno.EACCES: (-3, "Access denied (insufficient permissions)"),
    errno.ENODEV: (-4, "No such device (it may have been disconnected)"),
    errno.ENOENT: (-5, "Entity not found"),
    errno.EBUSY: (-6, "Resource busy"),
    errno.EOVERFLOW: (-8, "Overflow"),
    errno.EPIPE: (-9, "Pipe error"),
}


def usb_error(code: int, detail: str = "") -> usb.core.USBError:
    """The ``USBError`` libusb would raise for errno ``code``."""
    backend_code, text = _LIBUSB_ERRORS[code]
    return usb.core.USBError(f"{text}{': ' + detail if detail else ''}", backend_code, code)


def timeout_error() -> usb.core.USBTimeoutError:
    return usb.core.USBTimeoutError("Operation timed out", -7, errno.ETIMEDOUT)


class UsbFaults:
    """Cable, kernel-driver and claim state of one device, and the errors that follow from it.

    Args:
        interface: The device's interface number.
        kernel_driver_active: Whether the kernel driver holds the interface now.
        kernel_driver_on_replug: Whether it binds again when the cable is plugged back in.
        access_denied: Opening fails with EACCES (no udev rule).
        configuration_value: The one configuration the device has.
        history: Where host actions are written down (shared with the device).
    """

    def __init__(self, *, interface: int, kernel_driver_active: bool,
                 kernel_driver_on_replug: bool, access_denied: bool, configuration_value: int,
                 history: list[str]) -> None:
        self.kernel_driver_attached: dict[int, bool] = {interface: kernel_driver_active}
        self.claimed: set[int] = set()
        self.unplugged = False
        self.unplug_now = threading.Event()  # set while unplugged: cuts a pending wait short
        self._on_replug = kernel_driver_on_replug
        self._access_denied = access_denied
        self._configuration_value = configuration_value
        self._history = history

    # -- the cable ------------------------------------------------------------------------

    def unplug(self) -> None:
        self.unplugged = True
        self._history.append("unplugged")
        self.unplug_now.set()

    def replug(self) -> None:
        self.unplugged = False
        self.unplug_now.clear()
        self.claimed.clear()
        for intf in self.kernel_driver_attached:
            self.kernel_driver_attached[intf] = self._on_replug
        self._history.append("replugged")

    def alive(self) -> None:
        if self.unplugged:
            raise usb_error(errno.ENODEV)

    # -- handles and interfaces -----------------------------------------------------------

    def check_open(self) -> None:
        self.alive()
        if self._access_denied:
            raise usb_error(errno.EACCES)

    def closed(self) -> None:
        self.claimed.clear()

    def handle_ok(self, handle_open: bool) -> None:
        self.alive()
        if not handle_open:
            raise usb_error(errno.EIO, "device handle is closed")

    def interface_ok(self, intf: int) -> None:
        if intf not in self.kernel_driver_attached:
            raise usb_error(errno.ENOENT, f"no interface {intf}")

    def detach(self, intf: int) -> None:
        self.interface_ok(intf)
        if not self.kernel_driver_attached[intf]:
            raise usb_error(errno.ENOENT, "no kernel driver attached")
        self.kernel_driver_attached[intf] = False
        self._history.append(f"detach {intf}")

    def attach(self, intf: int) -> None:
        self.interface_ok(intf)
        if intf in self.claimed:
            raise usb_error(errno.EBUSY, "interface is claimed by this program")
        if self.kernel_driver_attached[intf]:
            raise usb_error(errno.EBUSY, "a kernel driver is already attached")
        self.kernel_driver_attached[intf] = True
        self._history.append(f"attach {intf}")

    def claim(self, intf: int) -> None:
        self.interface_ok(intf)
        if self.kernel_driver_attached[intf]:
            raise usb_error(errno.EBUSY, "the kernel driver holds the interface")
        self.claimed.add(intf)
        self._history.append(f"claim {intf}")

    def release(self, intf: int) -> None:
        if intf not in self.claimed:
            raise usb_error(errno.ENOENT, f"interface {intf} is not claimed")
        self.claimed.discard(intf)
        self._history.append(f"release {intf}")

    def require_claimed(self, intf: int) -> None:
        if intf not in self.claimed:
            raise usb_error(errno.EBUSY, f"interface {intf} is not claimed")

    def interface_request_ok(self, intf: int) -> None:
        """A class request to an interface fails while the kernel driver holds it."""
        self.interface_ok(intf)
        if self.kernel_driver_attached[intf] and intf not in self.claimed:
            raise usb_error(errno.EBUSY, "the kernel driver holds the interface")

    def set_configuration(self, value: int) -> None:
        if any(self.kernel_driver_attached.values()):
            raise usb_error(errno.EBUSY, "a kernel driver is bound to an interface")
        if value != self._configuration_value:
            raise usb_error(errno.ENOENT, f"no configuration {value}")
        self._history.append(f"set_configuration {value}")
