"""The heft recording format: round trip, version and syntax errors, replay, live tap."""

from __future__ import annotations

import asyncio
import contextlib
import io
import json
from pathlib import Path

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from heft.drivers.reading import Reading
from heft.drivers.recording import (
    Chunk,
    RecordingError,
    RecordingHeader,
    RecordingTransport,
    RecordingVersionError,
    RecordingWriter,
    ReplayTransport,
    parse_recording,
    read_recording,
    replay_outputs,
    write_recording,
)
from heft.drivers.registry import create_driver
from heft.drivers.session import DeviceSession
from heft.drivers.transport import SerialTransport
from tests.test_drivers_serial import FIXTURES, PtyDevice, collect, essence

chunks_st = st.lists(
    st.builds(
        Chunk,
        t=st.integers(0, 10**9).map(lambda n: n / 1e6),
        device=st.sampled_from(["bench-1", "qc-1", "beam-1"]),
        data=st.binary(min_size=0, max_size=64),
        direction=st.sampled_from(["rx", "tx"]),
    ),
    max_size=20,
)


@settings(max_examples=60, deadline=None)
@given(chunks=chunks_st, binary=st.booleans(),
       options=st.dictionaries(st.sampled_from(["mode", "poll", "pattern"]),
                               st.text(max_size=12), max_size=3))
def test_round_trip(chunks: list[Chunk], binary: bool, options: dict[str, str]) -> None:
    header = RecordingHeader(device="bench-1", driver="poll_balance", options=options,
                             binary=binary, description="round trip")
    buf = io.StringIO()
    writer = RecordingWriter(buf, header)
    for chunk in chunks:
        writer.write(chunk)
    rec = parse_recording(buf.getvalue().splitlines(), "buffer")
    assert rec.header == header
    assert rec.chunks == chunks
    # Every line is plain JSON: other tools can read recordings.
    for line in buf.getvalue().splitlines():
        json.loads(line)


def test_file_round_trip_and_text_is_readable(tmp_path: Path) -> None:
    path = tmp_path / "r.jsonl"
    header = RecordingHeader(device="bench-1", driver="stream_balance")
    write_recording(path, header, [Chunk(0.5, "bench-1", b"ST,GS,+00001.00   g\r\n"),
                                   Chunk(0.6, "bench-1", b"Z\r\n", "tx")])
    lines = path.read_text().splitlines()
    assert json.loads(lines[1]) == {"t": 0.5, "device": "bench-1",
                                    "rx": "ST,GS,+00001.00   g\r\n"}
    assert json.loads(lines[2])["tx"] == "Z\r\n"
    assert read_recording(path).header == header


def header_line(**changes: object) -> str:
    base = {"format": "heft-recording", "version": 1, "device": "d", "driver": "beam"}
    base.update(changes)
    return json.dumps(base)


def test_other_version_is_refused_by_number() -> None:
    with pytest.raises(RecordingVersionError, match=r"version 2; this heft reads version 1"):
        parse_recording([header_line(version=2)], "future.jsonl")


@pytest.mark.parametrize(("lines", "fragment"), [
    ([], "empty file"),
    (['{"format": "something-else"}'], "not a heft recording"),
    (["not json"], "header is not JSON"),
    ([header_line(device="")], ":1: bad header: device"),
    ([header_line(), '{"t": 1, "device": "d"}'], "x.jsonl:2: a chunk needs exactly one of"),
    ([header_line(), '{"t": 1, "device": "d", "rx": "a", "tx": "b"}'], "x.jsonl:2:"),
    ([header_line(), '{"t": -1, "device": "d", "rx": "a"}'], "x.jsonl:2: t:"),
    ([header_line(), '{"t": 1, "device": "d", "rx_hex": "zz"}'], "rx_hex does not hold bytes"),
    ([header_line(), '{"t": 1, "device": "d", "rx": "\\u20ac"}'], "rx does not hold bytes"),
    ([header_line(), "", '{"t": 1, "device": "d", "rx": "a"', ], "x.jsonl:3:"),
])
def test_malformed_recordings_name_file_and_line(lines: list[str], fragment: str) -> None:
    with pytest.raises(RecordingError) as err:
        parse_recording(lines, "x.jsonl")
    assert fragment in str(err.value)


def test_replay_stamps_recorded_time() -> None:
    rec = read_recording(FIXTURES / "recordings/stream_balance.jsonl")
    driver = create_driver(rec.header.driver, rec.header.device, rec.header.options)
    out = replay_outputs(rec, driver, t0=1000.0)
    # Every reading is stamped with the time of the chunk that completed its line (the CR of
    # each CRLF; every line has exactly one).
    line_ends = [c.t for c in rec.rx if b"\r" in c.data]
    assert len(line_ends) == 10
    assert [o.t_mono_s for o in out if isinstance(o, Reading)] == [
        1000.0 + t for t in line_ends if t != line_ends[7]]  # line 8 is the TR (tare) line


async def test_replay_transport_honours_recorded_time() -> None:
    """Played back through a session with a fake clock: the waits are the recorded gaps."""
    rec = read_recording(FIXTURES / "recordings/scanner.jsonl")
    now = [0.0]
    waits: list[float] = []

    async def fake_sleep(seconds: float) -> None:
        waits.append(seconds)
        now[0] += seconds

    transport = ReplayTransport(rec, sleep=fake_sleep, clock=lambda: now[0], speed=2.0)
    driver = create_driver("scanner", "scan-1", rec.header.options)
    session = DeviceSession("scan-1", driver, transport, clock=lambda: now[0])
    got = []
    with pytest.raises(Exception, match="recording ended"):
        async for item in session.outputs():
            got.append(item)
    assert [g.club_id for g in got] == ["LC-10231", "LC-10232", "LC-20017"]  # type: ignore[union-attr]
    assert sum(waits) == pytest.approx(rec.rx[-1].t / 2.0)
    assert [g.t_mono_s for g in got] == pytest.approx(
        [c.t / 2.0 for c in rec.rx if b"\r" in c.data])


async def test_live_session_tap_records_what_replays_identically(tmp_path: Path) -> None:
    rec = read_recording(FIXTURES / "recordings/beam_2ch.jsonl")
    dev = PtyDevice()
    path = tmp_path / "live.jsonl"
    try:
        header = RecordingHeader(device="beam-1", driver="beam")
        with RecordingWriter(path, header) as writer:
            transport = RecordingTransport(SerialTransport(dev.path, baudrate=115200), writer)
            session = DeviceSession("beam-1", create_driver("beam", "beam-1"), transport)
            total = sum(len(c.data) for c in rec.rx)
            live = await collect(session, 1, on_open=lambda: dev.play(rec),
                                 until=lambda: session.driver.stats.bytes_in == total)
    finally:
        dev.close()
    recorded = read_recording(path)
    assert recorded.chunks[0].direction == "tx" and recorded.chunks[0].data == b"!ID\n"
    assert b"".join(c.data for c in recorded.rx) == b"".join(c.data for c in rec.rx)
    again = replay_outputs(recorded, create_driver("beam", "beam-1"))
    assert essence(again) == essence(live)
    ts = [c.t for c in recorded.chunks]
    assert ts == sorted(ts)


async def test_replay_transport_hold_open_waits_for_close() -> None:
    rec = read_recording(FIXTURES / "recordings/scanner.jsonl")
    transport = ReplayTransport(rec, speed=1000.0, hold_open=True)
    await transport.open()
    for _ in rec.rx:
        await transport.read()
    pending = asyncio.ensure_future(transport.read())
    await asyncio.sleep(0.05)
    assert not pending.done()
    await transport.close()
    with contextlib.suppress(Exception):
        await pending
    assert pending.done()
