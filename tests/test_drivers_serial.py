"""Serial protocols end to end: real pyserial on a pseudo-terminal, DeviceSession, drivers.

The test plays the device on the pty's master side from a thread (recorded chunks, or a small
responder that answers host commands); the session opens the slave path through SerialTransport.
"""

from __future__ import annotations

import asyncio
import contextlib
import os
import select
import threading
import time
from collections.abc import Callable
from pathlib import Path

import pytest

from heft.drivers.base import CommandReply, DeviceSilentError, TransportError
from heft.drivers.reading import DeviceInfo, DriverOutput, Reading
from heft.drivers.recording import Recording, read_recording, replay_outputs
from heft.drivers.registry import create_driver
from heft.drivers.session import DeviceSession
from heft.drivers.transport import SerialTransport, open_transport

FIXTURES = Path(__file__).resolve().parent.parent / "hardware_fixtures"
TIMEOUT_S = 15.0  # generous: the machine is shared and slow; tests normally take milliseconds


class PtyDevice:
    """The device end of a pseudo-terminal: records what the host sends, writes what it says.

    ``responder(line) -> bytes | None`` answers each complete line the host sends.
    """

    def __init__(self, responder: Callable[[bytes], bytes | None] | None = None) -> None:
        self.master, self.slave = os.openpty()
        self.path = os.ttyname(self.slave)
        self.received = bytearray()
        self.responder = responder
        self._stop = threading.Event()
        self._buf = bytearray()
        self._thread = threading.Thread(target=self._read_host, daemon=True)
        self._thread.start()

    def _read_host(self) -> None:
        while not self._stop.is_set():
            try:
                ready, _, _ = select.select([self.master], [], [], 0.05)
                if not ready:
                    continue
                data = os.read(self.master, 1024)
            except OSError:
                return
            if not data:
                return
            self.received += data
            self._buf += data
            while b"\n" in self._buf:
                line, _, rest = bytes(self._buf).partition(b"\n")
                self._buf = bytearray(rest)
                if self.responder is not None:
                    answer = self.responder(line.rstrip(b"\r"))
                    if answer:
                        self.write(answer)

    def write(self, data: bytes) -> None:
        with contextlib.suppress(OSError):
            os.write(self.master, data)

    def play(self, recording: Recording, pause_s: float = 0.002) -> threading.Thread:
        """Write the recording's received chunks from a thread, in order."""

        def run() -> None:
            for chunk in recording.rx:
                self.write(chunk.data)
                time.sleep(pause_s)

        thread = threading.Thread(target=run, daemon=True)
        thread.start()
        return thread

    def unplug(self) -> None:
        """Close the master side: to the host this is a USB adapter pulled out."""
        self._stop.set()
        with contextlib.suppress(OSError):
            os.close(self.master)

    def close(self) -> None:
        self.unplug()
        self._thread.join(2)
        with contextlib.suppress(OSError):
            os.close(self.slave)


@pytest.fixture
def pty_device() -> Callable[..., PtyDevice]:
    made: list[PtyDevice] = []

    def make(responder: Callable[[bytes], bytes | None] | None = None) -> PtyDevice:
        dev = PtyDevice(responder)
        made.append(dev)
        return dev

    yield make  # type: ignore[misc]
    for dev in made:
        dev.close()


async def wait_for(condition: Callable[[], bool], what: str) -> None:
    deadline = time.monotonic() + TIMEOUT_S
    while not condition():
        if time.monotonic() > deadline:
            raise AssertionError(f"timed out waiting for {what}")
        await asyncio.sleep(0.01)


async def collect(
    session: DeviceSession, count: int, on_open: Callable[[], object] | None = None,
    until: Callable[[], bool] | None = None,
) -> list[DriverOutput]:
    """Run the session until ``count`` outputs arrived and ``until()`` holds, then close it.

    ``on_open`` runs once the port is open (input flushed), so nothing written is lost.
    """
    out: list[DriverOutput] = []

    async def consume() -> None:
        async with contextlib.aclosing(session.outputs()) as outputs:
            async for item in outputs:
                out.append(item)

    task = asyncio.create_task(consume())
    try:
        async with asyncio.timeout(TIMEOUT_S):
            await wait_for(lambda: session.is_open or task.done(), "port open")
            if on_open is not None:
                on_open()
            while len(out) < count or (until is not None and not until()):
                if task.done():
                    task.result()  # raises what ended the session early
                await asyncio.sleep(0.005)
    finally:
        task.cancel()
        with contextlib.suppress(asyncio.CancelledError):
            await task
    return out


def session_for(recording: Recording, path: str, **kw: object) -> DeviceSession:
    h = recording.header
    driver = create_driver(h.driver, h.device, h.options)
    return DeviceSession(h.device, driver, SerialTransport(path, baudrate=115200), **kw)  # type: ignore[arg-type]


def essence(outputs: list[DriverOutput]) -> list[tuple[object, ...]]:
    """What must match between replay and live (not the arrival times, not chunking)."""
    rows: list[tuple[object, ...]] = []
    for o in outputs:
        if isinstance(o, Reading):
            rows.append((o.channel, o.value, o.device_unit, o.flags, o.raw, o.seq))
        else:
            rows.append((type(o).__name__, getattr(o, "club_id", None)))
    return rows


def expected_from(recording: Recording) -> list[DriverOutput]:
    h = recording.header
    return replay_outputs(recording, create_driver(h.driver, h.device, h.options))


@pytest.mark.parametrize("name", [
    "recordings/stream_balance.jsonl", "recordings/scanner.jsonl",
    "malformed/stream_balance_units_overload.jsonl", "malformed/scanner_bad_scans.jsonl",
])
async def test_streaming_device_over_pty(pty_device: Callable[..., PtyDevice], name: str) -> None:
    rec = read_recording(FIXTURES / name)
    dev = pty_device()
    session = session_for(rec, dev.path)
    expected = expected_from(rec)
    total = sum(len(c.data) for c in rec.rx)
    out = await collect(session, len(expected), on_open=lambda: dev.play(rec),
                        until=lambda: session.driver.stats.bytes_in == total)
    assert essence(out) == essence(expected)
    assert session.driver.stats.frame_errors == create_frame_errors(rec)


def create_frame_errors(rec: Recording) -> int:
    h = rec.header
    driver = create_driver(h.driver, h.device, h.options)
    replay_outputs(rec, driver)
    return driver.stats.frame_errors


async def test_beam_over_pty_asks_for_hello_and_reads_samples(
    pty_device: Callable[..., PtyDevice],
) -> None:
    rec = read_recording(FIXTURES / "recordings/beam_2ch.jsonl")
    dev = pty_device()
    session = session_for(rec, dev.path)
    expected = expected_from(rec)
    out = await collect(session, len(expected), on_open=lambda: dev.play(rec))
    assert essence(out) == essence(expected)
    assert isinstance(out[0], DeviceInfo) and out[0].channels == 2
    await wait_for(lambda: dev.received.startswith(b"!ID\n"), "the !ID sent on open")
    assert session.driver.stats.noise_bytes == 248  # the boot banner, ignored


def poll_balance_responder(weights: list[bytes]) -> Callable[[bytes], bytes | None]:
    """A balance: answers SI with the next weight line (the last repeats), Z, T and @."""
    queue = list(weights)

    def answer(line: bytes) -> bytes | None:
        if line == b"SI":
            return queue.pop(0) if len(queue) > 1 else queue[0]
        return {b"Z": b"Z A\r\n", b"T": b"T S     100.00 g\r\n", b"@": b'I4 A "LC7"\r\n',
                b"SIR": None}.get(line, b"ES\r\n")

    return answer


async def test_poll_balance_polls_and_zeroes_over_pty(
    pty_device: Callable[..., PtyDevice],
) -> None:
    weights = [b"S D      10.00 g\r\n", b"S S      12.50 g\r\n", b"S S      12.50 g\r\n"]
    dev = pty_device(poll_balance_responder(weights))
    driver = create_driver("poll_balance", "qc-1", {"poll_interval_s": 0.02})
    session = DeviceSession("qc-1", driver, SerialTransport(dev.path))
    replies: list[CommandReply | None] = []

    async def zero_when_open() -> None:
        await wait_for(lambda: session.is_open, "port open")
        replies.append(await session.send_command("zero", reply_timeout_s=TIMEOUT_S))

    zero_task = asyncio.create_task(zero_when_open())
    out = await collect(session, 4)
    await zero_task
    values = [(o.value, o.flags.name) for o in out if isinstance(o, Reading)]
    assert values[:3] == [(10.0, "MOTION"), (12.5, "STABLE"), (12.5, "STABLE")]
    assert dev.received.count(b"SI\r\n") >= 4
    assert b"Z\r\n" in dev.received
    (reply,) = replies
    assert reply is not None and (reply.command, reply.ok) == ("zero", True)


async def test_poll_balance_continuous_resumes_after_tare(
    pty_device: Callable[..., PtyDevice],
) -> None:
    rec = read_recording(FIXTURES / "recordings/poll_balance_continuous.jsonl")
    holder: list[PtyDevice] = []

    def answer(line: bytes) -> bytes | None:
        if line == b"T":  # the recording holds the whole episode, tare reply included
            holder[0].play(rec)
        return None

    dev = pty_device(answer)
    holder.append(dev)
    driver = create_driver("poll_balance", "bench-1", {"mode": "continuous"})
    session = DeviceSession("bench-1", driver, SerialTransport(dev.path))
    result: list[CommandReply | None] = []

    async def tare_when_open() -> None:
        await wait_for(lambda: dev.received.startswith(b"SIR\r\n"), "SIR sent on open")
        result.append(await session.send_command("tare", reply_timeout_s=TIMEOUT_S))

    task = asyncio.create_task(tare_when_open())
    out = await collect(session, 10)  # the recording's readings; the tare reply is not one
    await task
    assert essence(out) == essence(expected_from(rec))
    assert dev.received == b"SIR\r\nT\r\nSIR\r\n"  # continuous send restarted after T
    assert result[0] is not None
    assert (result[0].command, result[0].ok, result[0].value_g) == ("tare", True, 332.41)


async def test_regex_line_polls_over_pty(pty_device: Callable[..., PtyDevice]) -> None:
    rec = read_recording(FIXTURES / "recordings/regex_line.jsonl")
    replies = [c.data for c in rec.rx]
    whole = b"".join(replies).splitlines(keepends=True)

    def answer(line: bytes) -> bytes | None:
        return whole.pop(0) if line == b"P" and whole else None

    dev = pty_device(answer)
    options = {**rec.header.options, "poll_interval_s": 0.02}
    driver = create_driver("regex_line", "bench-3", options)
    session = DeviceSession("bench-3", driver, SerialTransport(dev.path))
    out = await collect(session, 6)
    assert [(o.value, o.flags.name) for o in out if isinstance(o, Reading)] == [
        (0.0, "MOTION"), (44.8, "MOTION"), (45.6, "MOTION"), (45.2, "STABLE"), (45.2, "STABLE"),
        (-0.4, "STABLE")]
    assert dev.received.startswith(b"P\r\nP\r\n")


async def test_port_that_disappears_raises_transport_error(
    pty_device: Callable[..., PtyDevice],
) -> None:
    rec = read_recording(FIXTURES / "recordings/stream_balance.jsonl")
    dev = pty_device()
    session = session_for(rec, dev.path)
    got: list[DriverOutput] = []

    async def run() -> None:
        async for item in session.outputs():
            got.append(item)
            if len(got) == 3:
                dev.unplug()

    async with asyncio.timeout(TIMEOUT_S):
        task = asyncio.create_task(run())
        await wait_for(lambda: session.is_open, "port open")
        dev.play(rec, pause_s=0.05)
        with pytest.raises(TransportError, match="lost"):
            await task
    assert len(got) >= 3
    assert not session.is_open


async def test_missing_port_raises_transport_error(tmp_path: Path) -> None:
    transport = SerialTransport(str(tmp_path / "ttyUSB-not-there"))
    with pytest.raises(TransportError, match="cannot open"):
        await transport.open()


async def test_silent_device_raises_device_silent(pty_device: Callable[..., PtyDevice]) -> None:
    rec = read_recording(FIXTURES / "malformed/beam_boot_then_silent.jsonl")
    dev = pty_device()
    session = session_for(rec, dev.path, silence_timeout_s=1.5)
    got: list[DriverOutput] = []

    async def run() -> None:
        async for item in session.outputs():
            got.append(item)

    async with asyncio.timeout(TIMEOUT_S):
        task = asyncio.create_task(run())
        await wait_for(lambda: session.is_open, "port open")
        dev.write(b"".join(c.data for c in rec.rx))  # all at once: a loaded CI box may stall
        with pytest.raises(DeviceSilentError, match="sent nothing"):
            await task
    assert [o.value for o in got if isinstance(o, Reading)] == [1200.0, 1201.0, 1202.0]


async def test_loop_url_through_serial_for_url() -> None:
    """``loop://`` is pyserial's built-in loopback: what the host writes comes back."""
    driver = create_driver("stream_balance", "loop-1")
    transport = open_transport("loop://", {"baudrate": 19200})
    session = DeviceSession("loop-1", driver, transport)

    async def speak() -> None:
        await wait_for(lambda: session.is_open, "port open")
        await transport.write(b"ST,GS,+00042.00   g\r\n")

    task = asyncio.create_task(speak())
    out = await collect(session, 1)
    await task
    assert isinstance(out[0], Reading) and out[0].value == 42.0


def test_bad_serial_option_names_the_option() -> None:
    from heft.drivers.base import DriverConfigError

    with pytest.raises(DriverConfigError, match="parity: "):
        SerialTransport("/dev/ttyUSB0", parity="X")
    with pytest.raises(DriverConfigError, match="stopbits: "):
        open_transport("/dev/ttyUSB0", {"stopbits": 3})


async def test_socket_url_reads_a_networked_balance() -> None:
    """``socket://`` (a serial server on the bench network; here on loopback)."""
    async def serve(_: asyncio.StreamReader, writer: asyncio.StreamWriter) -> None:
        # Streams like the balance does; the host flushes whatever came before it was ready.
        with contextlib.suppress(ConnectionError):
            for _ in range(int(TIMEOUT_S / 0.05)):
                writer.write(b"ST,NT,+00012.30   g\r\n")
                await writer.drain()
                await asyncio.sleep(0.05)
        writer.close()

    server = await asyncio.start_server(serve, "127.0.0.1", 0)
    port = server.sockets[0].getsockname()[1]
    try:
        driver = create_driver("stream_balance", "net-1")
        session = DeviceSession("net-1", driver, open_transport(f"socket://127.0.0.1:{port}"))
        reading = (await collect(session, 1))[0]
    finally:
        server.close()
    assert isinstance(reading, Reading) and reading.value == 12.3
    assert reading.flags.name is not None and "NET" in repr(reading.flags)


async def test_hwgrep_without_a_match_is_a_transport_error() -> None:
    with pytest.raises(TransportError, match="cannot open"):
        await SerialTransport("hwgrep://ffff:fffe").open()


async def test_dtr_off_is_accepted_on_open(pty_device: Callable[..., PtyDevice]) -> None:
    """``dtr = false`` (no reset of Arduino-style boards) must not break ports without modem
    lines, such as this pty."""
    dev = pty_device()
    transport = open_transport(dev.path, {"baudrate": 115200, "dtr": False, "rts": False})
    await transport.open()
    try:
        dev.write(b"hello\n")
        got = b""
        async with asyncio.timeout(TIMEOUT_S):
            while len(got) < 6:
                got += await transport.read()
        assert got == b"hello\n"
    finally:
        await transport.close()

