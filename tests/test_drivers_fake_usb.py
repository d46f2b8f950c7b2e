"""The fake pyusb backend answers as libusb on Linux does, faults included (through pyusb's API).

Expected errors are those the libusb 1.0 API documentation gives for each call (from memory):
claim_interface BUSY while another driver holds the interface; attach_kernel_driver BUSY while
a driver is attached or the interface claimed; detach_kernel_driver NOT_FOUND when no driver is
attached; set_configuration BUSY while interfaces are held; a transfer OVERFLOW when the device
sends more than the buffer takes; NO_DEVICE after a disconnect; ACCESS without permission.
pyusb carries them as ``USBError.errno`` (EBUSY, ENOENT, EOVERFLOW, ENODEV, EACCES).
"""

from __future__ import annotations

import errno
from collections.abc import Callable

import pytest
import usb.core
import usb.util

from heft.drivers.fake_usb import (
    FakeBackend,
    FakeUsbDevice,
    ReportEvent,
    scale_device_definition,
    weight_report,
)

REPORT = weight_report(100.0)
EP_IN = 0x81


def _device(events: list[ReportEvent], **kw: object) -> tuple[FakeUsbDevice, usb.core.Device]:
    fake = FakeUsbDevice(scale_device_definition(), events, **kw)  # type: ignore[arg-type]
    dev = usb.core.find(backend=FakeBackend(fake), idVendor=0x1209, idProduct=0x0001)
    assert isinstance(dev, usb.core.Device)
    return fake, dev


def _errno_of(call: Callable[[], object]) -> int | None:
    with pytest.raises(usb.core.USBError) as err:
        call()
    code: int | None = err.value.errno
    return code


def test_kernel_driver_ownership_follows_libusb() -> None:
    fake, dev = _device([])
    assert dev.is_kernel_driver_active(0)
    assert _errno_of(lambda: usb.util.claim_interface(dev, 0)) == errno.EBUSY
    assert _errno_of(lambda: dev.set_configuration()) == errno.EBUSY
    assert _errno_of(lambda: dev.attach_kernel_driver(0)) == errno.EBUSY  # already attached
    dev.detach_kernel_driver(0)
    assert _errno_of(lambda: dev.detach_kernel_driver(0)) == errno.ENOENT  # nothing attached
    usb.util.claim_interface(dev, 0)
    assert _errno_of(lambda: dev.attach_kernel_driver(0)) == errno.EBUSY  # claimed by us
    usb.util.release_interface(dev, 0)
    dev.attach_kernel_driver(0)
    usb.util.dispose_resources(dev)
    assert fake.history == ["open", "detach 0", "claim 0", "release 0", "attach 0", "close"]


def test_a_report_longer_than_the_buffer_overflows() -> None:
    _, dev = _device([ReportEvent(t=0.0, rx=REPORT), ReportEvent(t=0.1, rx=REPORT)],
                     kernel_driver_active=False)
    usb.util.claim_interface(dev, 0)
    assert bytes(dev.read(EP_IN, 8, timeout=100)) == REPORT
    assert _errno_of(lambda: dev.read(EP_IN, 4, timeout=100)) == errno.EOVERFLOW
    usb.util.dispose_resources(dev)


def test_virtual_clock_times_out_on_gaps_without_sleeping() -> None:
    fake, dev = _device([ReportEvent(t=0.0, rx=REPORT), ReportEvent(t=5.0, rx=REPORT)],
                        kernel_driver_active=False)
    usb.util.claim_interface(dev, 0)
    dev.read(EP_IN, 8, timeout=100)
    for _ in range(3):  # 3 x 1 s of virtual time, still short of t = 5 s
        with pytest.raises(usb.core.USBTimeoutError):
            dev.read(EP_IN, 8, timeout=1000)
    assert bytes(dev.read(EP_IN, 8, timeout=3000)) == REPORT  # due within this read
    assert (fake.timeouts, fake.reports_sent) == (3, 2)
    usb.util.dispose_resources(dev)


@pytest.mark.parametrize(("end", "expected"), [
    ("hold", [b"A", b"B", b"B", b"B"]),  # the last report again every hold interval
    ("loop", [b"A", b"B", b"A", b"B"]),  # the sequence from its start
])
def test_after_the_last_event(end: str, expected: list[bytes]) -> None:
    a, b = (weight_report(w) for w in (1.0, 2.0))
    events = [ReportEvent(t=0.0, rx=a), ReportEvent(t=0.1, rx=b)]
    _, dev = _device(events, end=end, kernel_driver_active=False)
    usb.util.claim_interface(dev, 0)
    got = [bytes(dev.read(EP_IN, 8, timeout=1000)) for _ in expected]
    assert got == [{b"A": a, b"B": b}[x] for x in expected]
    usb.util.dispose_resources(dev)


def test_unplug_ends_every_call_and_replug_rebinds_the_kernel_driver() -> None:
    fake, dev = _device([ReportEvent(t=0.0, rx=REPORT)])
    dev.detach_kernel_driver(0)
    fake.unplug()
    assert _errno_of(lambda: dev.is_kernel_driver_active(0)) == errno.ENODEV
    assert list(usb.core.find(backend=FakeBackend(fake), find_all=True)) == []  # left the bus
    fake.replug()
    assert fake.kernel_driver_attached == {0: True}
    assert fake.history[-2:] == ["unplugged", "replugged"]


def test_an_access_denied_device_refuses_to_open() -> None:
    definition = scale_device_definition().model_copy(update={"access_denied": True})
    dev = usb.core.find(backend=FakeBackend(FakeUsbDevice(definition, [])), idVendor=0x1209)
    assert isinstance(dev, usb.core.Device)
    assert _errno_of(lambda: dev.is_kernel_driver_active(0)) == errno.EACCES
