"""Byte transports: what a ``DeviceSession`` reads from and writes to.

``Transport`` is the small async interface every transport implements. ``SerialTransport``
covers everything pyserial's ``serial_for_url`` opens: real ports, ``/dev/serial/by-id/`` links,
``hwgrep://VID:PID``, ``socket://host:port``, ``loop://``. A reader thread per port blocks in
pyserial and hands chunks to the asyncio loop, so the loop never blocks on a port.
``open_transport`` picks the transport from the port string (``usb-hid://`` goes to
``drivers.usb_transport``).

Errors: opening or losing a port raises ``TransportError`` (from ``drivers.base``), with the
pyserial/OS error chained. Nothing here retries; the service's supervisor does.
"""

from __future__ import annotations

import asyncio
import contextlib
import errno
import importlib
import logging
import threading
from collections.abc import Mapping
from typing import Any, Literal, Protocol, runtime_checkable

import serial
from pydantic import BaseModel, ConfigDict, Field, ValidationError, field_validator

from heft.drivers.base import DriverConfigError, TransportError, describe_options_error

__all__ = [
    "SerialSettings",
    "SerialTransport",
    "Transport",
    "TransportError",
    "open_transport",
]

log = logging.getLogger("heft.transport")

USB_HID_SCHEME = "usb-hid://"


@runtime_checkable
class Transport(Protocol):
    """An open-able byte pipe to one device.

    ``read`` returns the next non-empty chunk as it arrived and raises ``TransportError`` when
    the device is lost. It must be safe to call ``write`` while a ``read`` is pending.
    """

    description: str

    async def open(self) -> None: ...

    async def read(self) -> bytes: ...

    async def write(self, data: bytes) -> None: ...

    async def close(self) -> None: ...


class SerialSettings(BaseModel):
    """Serial line settings accepted in a device's configuration."""

    model_config = ConfigDict(extra="forbid", frozen=True)

    baudrate: int = Field(default=9600, gt=0)
    bytesize: Literal[5, 6, 7, 8] = 8
    parity: Literal["N", "E", "O", "M", "S"] = "N"
    stopbits: float = 1
    xonxoff: bool = False
    rtscts: bool = False
    dsrdtr: bool = False
    dtr: bool | None = None
    """Force DTR on open (False avoids resetting Arduino-style boards); None: pyserial default."""
    rts: bool | None = None
    write_timeout_s: float = Field(default=2.0, gt=0)

    @field_validator("stopbits")
    @classmethod
    def _known_stopbits(cls, value: float) -> float:
        if value not in (1, 1.5, 2):
            raise ValueError("stopbits must be 1, 1.5 or 2")
        return value


# How long the reader thread blocks in one pyserial read before checking for close.
_READ_POLL_S = 0.1


class SerialTransport:
    """A pyserial port read by a dedicated thread.

    Args:
        url: Anything ``serial.serial_for_url`` accepts.
        baudrate: Line speed.
        **options: Other ``SerialSettings`` fields (parity, stopbits, rtscts, dtr, ...).

    Raises:
        DriverConfigError: for an unknown or malformed option (names it).
    """

    def __init__(self, url: str, baudrate: int = 9600, **options: Any) -> None:
        try:
            self.settings = SerialSettings.model_validate({"baudrate": baudrate, **options})
        except ValidationError as err:
            raise DriverConfigError(
                f"serial port {url!r}: {describe_options_error(err, SerialSettings)}") from None
        self.url = url
        self.description = f"serial {url} @ {self.settings.baudrate} baud"
        self._serial: serial.SerialBase | None = None
        self._queue: asyncio.Queue[bytes | BaseException] | None = None
        self._thread: threading.Thread | None = None
        self._stop = threading.Event()
        self._failure: TransportError | None = None

    async def open(self) -> None:
        if self._serial is not None:
            return
        loop = asyncio.get_running_loop()
        self._queue = asyncio.Queue()
        self._failure = None
        self._stop.clear()
        self._serial = await asyncio.to_thread(self._open_blocking)
        self._thread = threading.Thread(
            target=self._reader, args=(loop, self._serial, self._queue),
            name=f"heft-serial-{self.url}", daemon=True)
        self._thread.start()

    def _open_blocking(self) -> serial.SerialBase:
        s = self.settings
        try:
            port = serial.serial_for_url(
                self.url, do_not_open=True, baudrate=s.baudrate, bytesize=s.bytesize,
                parity=s.parity, stopbits=s.stopbits, xonxoff=s.xonxoff, rtscts=s.rtscts,
                dsrdtr=s.dsrdtr, timeout=_READ_POLL_S, write_timeout=s.write_timeout_s)
            if s.dtr is not None:
                port.dtr = s.dtr
            if s.rts is not None:
                port.rts = s.rts
            port.open()
            # Whatever queued before we opened (or a half line) is stale.
            port.reset_input_buffer()
        except (serial.SerialException, OSError, ValueError) as err:
            hint = ""
            if getattr(err, "errno", None) == errno.EACCES:
                hint = " (on Linux: add the user to the 'dialout' group, or add a udev rule)"
            raise TransportError(f"cannot open {self.description}: {err}{hint}") from err
        return port

    def _reader(
        self, loop: asyncio.AbstractEventLoop, port: serial.SerialBase,
        queue: asyncio.Queue[bytes | BaseException],
    ) -> None:
        """Thread body: block in pyserial, post each chunk (or the failure) to the loop."""
        item: bytes | BaseException
        while not self._stop.is_set():
            try:
                # Block for the first byte, then take whatever else already arrived with it.
                item = port.read(1)
                if item and port.in_waiting:
                    item += port.read(port.in_waiting)
            except (serial.SerialException, OSError, TypeError, AttributeError) as err:
                # TypeError/AttributeError: pyserial internals after a concurrent close.
                if self._stop.is_set():
                    return
                item = TransportError(f"{self.description} lost: {err}")
                item.__cause__ = err
            if not item:
                continue
            try:
                loop.call_soon_threadsafe(queue.put_nowait, item)
            except RuntimeError:  # the loop is closed: nobody is listening any more
                return
            if isinstance(item, BaseException):
                return

    async def read(self) -> bytes:
        if self._failure is not None:
            raise self._failure
        if self._queue is None:
            raise TransportError(f"{self.description} is not open")
        item = await self._queue.get()
        if isinstance(item, TransportError):
            self._failure = item
            raise item
        assert isinstance(item, bytes)
        return item

    async def write(self, data: bytes) -> None:
        port = self._serial
        if port is None:
            raise TransportError(f"{self.description} is not open")
        try:
            await asyncio.to_thread(port.write, data)
        except (serial.SerialException, OSError) as err:
            raise TransportError(f"write to {self.description} failed: {err}") from err

    async def close(self) -> None:
        port, thread = self._serial, self._thread
        self._serial = None
        self._thread = None
        self._stop.set()
        if thread is not None:
            await asyncio.to_thread(thread.join, 2 * _READ_POLL_S + 1.0)
        if port is not None:
            with contextlib.suppress(serial.SerialException, OSError):
                await asyncio.to_thread(port.close)
        if self._failure is None:
            self._failure = TransportError(f"{self.description} is closed")
        self._queue = None


def open_transport(port: str, options: Mapping[str, Any] | None = None) -> Transport:
    """Build (not yet open) the transport for a configured ``port`` string.

    ``usb-hid://VID:PID[?serial=...]`` goes to ``drivers.usb_transport``; anything else is a
    pyserial URL or device path with ``SerialSettings`` options.
    """
    opts = dict(options or {})
    if port.startswith(USB_HID_SCHEME):
        try:
            usb = importlib.import_module("heft.drivers.usb_transport")
        except ImportError as err:
            raise DriverConfigError(
                f"port {port!r}: USB HID support is unavailable: {err}") from err
        factory = usb.open_usb_transport
        transport: Transport = factory(port, opts)
        return transport
    return SerialTransport(port, **opts)
