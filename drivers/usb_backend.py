"""The pyusb backend heft reads USB HID scales through, and what transport and discovery share.

libusb 1.0 from the ``libusb-package`` wheel, unless a backend is passed in or set as the
default (tests, the bench simulator and demos pass ``heft.drivers.fake_usb.FakeBackend``).
"""

from __future__ import annotations

from typing import Any, Final

import usb.core
import usb.util

from heft.drivers.base import TransportError

USB_HID_SCHEME: Final = "usb-hid://"
SCALES_USAGE_PAGE: Final = 0x8D  # HID Usage Tables: the Scales usage page
HID_CLASS: Final = 0x03

_default_backend: Any = None


def set_default_backend(backend: Any) -> None:
    """Use ``backend`` for every transport and listing not given one (None: libusb again).

    For the bench simulator and demos, which drive a simulated scale through a configuration
    that only names ``usb-hid://VID:PID``.
    """
    global _default_backend
    _default_backend = backend


def backend_for(explicit: Any) -> Any:
    """``explicit``, else the default set here, else libusb."""
    if explicit is not None:
        return explicit
    if _default_backend is not None:
        return _default_backend
    import libusb_package  # imported late: loading libusb is not free and tests never need it

    backend = libusb_package.get_libusb1_backend()
    if backend is None:
        raise TransportError("libusb 1.0 could not be loaded (libusb-package wheel); USB HID "
                             "scales cannot be read on this machine")
    return backend


def string_descriptor(dev: usb.core.Device, index: int) -> str:
    """A string descriptor, or '' when the device cannot be asked (permissions, gone)."""
    if not index:
        return ""
    try:
        return str(usb.util.get_string(dev, index) or "")
    except (usb.core.USBError, ValueError, NotImplementedError):
        return ""
