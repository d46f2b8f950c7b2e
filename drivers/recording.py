"""The heft recording format: what a device sent (and what the host sent it), with timing.

JSON Lines, UTF-8. Line 1 is the header, every further line one chunk as it arrived::

    {"format": "heft-recording", "version": 1, "device": "bench-1", "driver": "poll_balance",
     "options": {"mode": "continuous"}, "created_utc": "2026-05-01T09:30:00Z", "binary": false,
     "description": "..."}
    {"t": 0.104, "device": "bench-1", "rx": "S D     101.37 g\\r\\n"}
    {"t": 0.250, "device": "bench-1", "tx": "Z\\r\\n"}

``t`` is seconds since the recording started. Exactly one of ``rx``/``rx_hex``/``tx``/``tx_hex``
per chunk: ``rx``/``tx`` hold the bytes as ISO-8859-1 text (one character per byte, so any byte
survives; JSON escapes control characters), ``*_hex`` the bytes as lower-case hex for binary
devices (``"binary": true`` in the header makes the writer use hex). A reader rejects any other
``version`` with a message naming it.

``RecordingWriter`` writes, ``read_recording`` reads, ``replay_outputs`` feeds a recording through
a driver, ``RecordingTransport`` taps a live transport, ``ReplayTransport`` plays a recording back
as if it were a port (at recorded pace through an injectable sleep).
"""

from __future__ import annotations

import asyncio
import json
import time
from collections.abc import Awaitable, Callable, Iterable, Iterator
from dataclasses import dataclass
from datetime import UTC, datetime
from pathlib import Path
from types import TracebackType
from typing import Any, Final, Literal, Self, TextIO

from pydantic import BaseModel, ConfigDict, Field, ValidationError

from heft.drivers.base import Driver, TransportError
from heft.drivers.reading import DriverOutput
from heft.drivers.transport import Transport
from heft.drivers.validation import problem_lines

FORMAT_NAME: Final = "heft-recording"
FORMAT_VERSION: Final = 1
_DATA_KEYS: Final = ("rx", "rx_hex", "tx", "tx_hex")

Direction = Literal["rx", "tx"]


class RecordingError(ValueError):
    """A recording file is malformed; the message names the file and line."""


class RecordingVersionError(RecordingError):
    """A recording of a format version this heft does not read."""


class RecordingHeader(BaseModel):
    """First line of a recording."""

    model_config = ConfigDict(extra="forbid", frozen=True)

    format: Literal["heft-recording"] = FORMAT_NAME
    version: Literal[1] = FORMAT_VERSION
    device: str = Field(min_length=1)
    driver: str = Field(min_length=1)
    options: dict[str, Any] = Field(default_factory=dict)
    created_utc: datetime = Field(default_factory=lambda: datetime.now(UTC))
    binary: bool = False
    description: str = ""


class _ChunkLine(BaseModel):
    model_config = ConfigDict(extra="forbid")

    t: float = Field(ge=0, allow_inf_nan=False)
    device: str = Field(min_length=1)
    rx: str | None = None
    rx_hex: str | None = None
    tx: str | None = None
    tx_hex: str | None = None


@dataclass(frozen=True, slots=True)
class Chunk:
    """Bytes that crossed the wire in one direction at ``t`` seconds into the recording."""

    t: float
    device: str
    data: bytes
    direction: Direction = "rx"


@dataclass(frozen=True, slots=True)
class Recording:
    header: RecordingHeader
    chunks: list[Chunk]

    @property
    def rx(self) -> list[Chunk]:
        """Only the chunks the device sent."""
        return [c for c in self.chunks if c.direction == "rx"]


def _encode(data: bytes, *, binary: bool) -> str:
    return data.hex() if binary else data.decode("latin-1")


def chunk_to_json(chunk: Chunk, *, binary: bool) -> str:
    """One JSON line (without newline) for ``chunk``."""
    key = chunk.direction + ("_hex" if binary else "")
    return json.dumps(
        {"t": round(chunk.t, 6), "device": chunk.device, key: _encode(chunk.data, binary=binary)})


class RecordingWriter:
    """Writes a recording line by line, flushing each so a crash keeps what was captured.

    Use as a context manager, or call ``close()``. ``target`` is a path or an open text file.
    """

    def __init__(self, target: Path | str | TextIO, header: RecordingHeader) -> None:
        self.header = header
        if isinstance(target, (str, Path)):
            self._file: TextIO = Path(target).open("w", encoding="utf-8")  # noqa: SIM115
            self._owns = True
        else:
            self._file = target
            self._owns = False
        self._file.write(json.dumps(header.model_dump(mode="json")) + "\n")
        self._file.flush()

    def write(self, chunk: Chunk) -> None:
        self._file.write(chunk_to_json(chunk, binary=self.header.binary) + "\n")
        self._file.flush()

    def write_rx(self, t: float, data: bytes) -> None:
        self.write(Chunk(t, self.header.device, data, "rx"))

    def write_tx(self, t: float, data: bytes) -> None:
        self.write(Chunk(t, self.header.device, data, "tx"))

    def close(self) -> None:
        if self._owns:
            self._file.close()

    def __enter__(self) -> Self:
        return self

    def __exit__(
        self, exc_type: type[BaseException] | None, exc: BaseException | None,
        tb: TracebackType | None,
    ) -> None:
        self.close()


def write_recording(path: Path | str, header: RecordingHeader, chunks: Iterable[Chunk]) -> None:
    """Write a whole recording at once."""
    with RecordingWriter(path, header) as writer:
        for chunk in chunks:
            writer.write(chunk)


def _parse_header(line: str, source: str) -> RecordingHeader:
    try:
        raw = json.loads(line)
    except json.JSONDecodeError as err:
        raise RecordingError(f"{source}:1: header is not JSON: {err}") from None
    if not isinstance(raw, dict) or raw.get("format") != FORMAT_NAME:
        raise RecordingError(f"{source}:1: not a heft recording (expected \"format\": "
                             f"\"{FORMAT_NAME}\" in the first line)")
    if raw.get("version") != FORMAT_VERSION:
        raise RecordingVersionError(
            f"{source}: recording format version {raw.get('version')!r}; this heft reads "
            f"version {FORMAT_VERSION} only")
    try:
        return RecordingHeader.model_validate(raw)
    except ValidationError as err:
        detail = _first_error(err, RecordingHeader)
        raise RecordingError(f"{source}:1: bad header: {detail}") from None


def _first_error(err: ValidationError, model: type[BaseModel]) -> str:
    return problem_lines(err, model, top="line", first_only=True)[0]


def _parse_chunk(line: str, source: str, number: int) -> Chunk:
    try:
        item = _ChunkLine.model_validate_json(line)
    except ValidationError as err:
        raise RecordingError(f"{source}:{number}: {_first_error(err, _ChunkLine)}") from None
    present = [k for k in _DATA_KEYS if getattr(item, k) is not None]
    if len(present) != 1:
        raise RecordingError(
            f"{source}:{number}: a chunk needs exactly one of {', '.join(_DATA_KEYS)}")
    key = present[0]
    text: str = getattr(item, key)
    try:
        data = bytes.fromhex(text) if key.endswith("_hex") else text.encode("latin-1")
    except (ValueError, UnicodeEncodeError) as err:
        raise RecordingError(f"{source}:{number}: {key} does not hold bytes: {err}") from None
    direction: Direction = "rx" if key.startswith("rx") else "tx"
    return Chunk(item.t, item.device, data, direction)


def parse_recording(lines: Iterable[str], source: str = "<recording>") -> Recording:
    """Parse recording lines (blank lines are ignored)."""
    numbered: Iterator[tuple[int, str]] = (
        (n, ln) for n, ln in enumerate(lines, start=1) if ln.strip())
    first = next(numbered, None)
    if first is None:
        raise RecordingError(f"{source}: empty file, expected a heft-recording header")
    header = _parse_header(first[1], source)
    return Recording(header, [_parse_chunk(ln, source, n) for n, ln in numbered])


def read_recording(path: Path | str) -> Recording:
    """Read a recording file. Raises RecordingError / RecordingVersionError naming the problem."""
    with Path(path).open(encoding="utf-8") as f:
        return parse_recording(f, str(path))


def replay_outputs(
    recording: Recording, driver: Driver, *, t0: float = 0.0, device: str | None = None
) -> list[DriverOutput]:
    """Feed the chunks received from ``device`` (default: the header's) to ``driver`` at t0 + t."""
    name = device or recording.header.device
    outputs: list[DriverOutput] = []
    for chunk in recording.rx:
        if chunk.device == name:
            outputs.extend(driver.feed(chunk.data, t0 + chunk.t))
    return outputs


class RecordingTransport:
    """Wraps a live transport and records every chunk read and written.

    Args:
        inner: The real transport.
        writer: Where chunks go (its header names the device).
        clock: Monotonic seconds; ``t`` is measured from ``open()``.
    """

    def __init__(
        self, inner: Transport, writer: RecordingWriter, *,
        clock: Callable[[], float] = time.monotonic,
    ) -> None:
        self.inner = inner
        self.writer = writer
        self.description = f"{inner.description} (recorded)"
        self._clock = clock
        self._t0: float | None = None
        # The clock reading taken when the last chunk arrived. A DeviceSession stamps its
        # readings with this same number, so a replay of the recording sees exactly the
        # timeline the live pipeline saw (not one a file write later).
        self.last_rx_mono_s: float | None = None

    def _t(self, now: float | None = None) -> float:
        now = self._clock() if now is None else now
        if self._t0 is None:
            self._t0 = now
        return max(0.0, now - self._t0)

    async def open(self) -> None:
        await self.inner.open()
        self._t()

    async def read(self) -> bytes:
        data = await self.inner.read()
        self.last_rx_mono_s = now = self._clock()
        self.writer.write_rx(self._t(now), data)
        return data

    async def write(self, data: bytes) -> None:
        self.writer.write_tx(self._t(), data)
        await self.inner.write(data)

    async def close(self) -> None:
        await self.inner.close()


class ReplayTransport:
    """A recording played back as a port: each received chunk is returned at its ``t``.

    What the host writes is kept in ``written``. After the last chunk ``read`` raises
    TransportError (the recorded device is gone), unless ``hold_open`` is set, in which case
    it waits until closed.
    """

    def __init__(
        self, recording: Recording, *, speed: float = 1.0,
        sleep: Callable[[float], Awaitable[None]] = asyncio.sleep,
        clock: Callable[[], float] = time.monotonic, hold_open: bool = False,
    ) -> None:
        if speed <= 0:
            raise ValueError(f"speed must be > 0, got {speed}")
        self.recording = recording
        self.description = f"replay of {recording.header.device} ({recording.header.driver})"
        self.written: list[bytes] = []
        self._chunks = [c for c in recording.rx if c.device == recording.header.device]
        self._speed, self._sleep, self._clock, self._hold = speed, sleep, clock, hold_open
        self._index = 0
        self._t0: float | None = None
        self._closed = asyncio.Event()

    async def open(self) -> None:
        self._t0 = self._clock()
        self._index = 0
        self._closed.clear()

    async def read(self) -> bytes:
        if self._t0 is None:
            raise TransportError(f"{self.description} is not open")
        if self._index >= len(self._chunks):
            if self._hold:
                await self._closed.wait()
            raise TransportError(f"{self.description}: recording ended")
        chunk = self._chunks[self._index]
        delay = self._t0 + chunk.t / self._speed - self._clock()
        if delay > 0:
            await self._sleep(delay)
        self._index += 1
        return chunk.data

    async def write(self, data: bytes) -> None:
        if self._t0 is None:
            raise TransportError(f"{self.description} is not open")
        self.written.append(data)

    async def close(self) -> None:
        self._t0 = None
        self._closed.set()
