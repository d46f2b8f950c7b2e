"""Simulated devices on real pseudo-terminals, read with real pyserial, parsed by the drivers."""

from __future__ import annotations

import asyncio
import time
from collections.abc import Iterator
from pathlib import Path

import pytest
import serial

from heft.drivers.reading import ClubTag, DeviceInfo, Flag, Reading, ValueKind
from heft.drivers.registry import create_driver
from heft.drivers.sim.definitions import RegexLineDef, builtin_definition
from heft.drivers.sim.devices import SimDevice, make_device
from heft.drivers.sim.physics import (
    BenchTimeline,
    Club,
    Dynamics,
    Placement,
    SingleScale,
    TwoSupports,
)
from heft.drivers.sim.pty_server import PtyDevice

CLUB = Club(390.0, 29.5, "LCW-0042")  # invented
QUIET = Dynamics(frequency_hz=5.0, damping_ratio=0.5, overshoot=0.1)
TIMEOUT_S = 10.0  # generous: the machine is shared and noisy


def _timeline(geometry: TwoSupports | SingleScale, t_on: float = 0.5) -> BenchTimeline:
    return BenchTimeline(geometry, [Placement(CLUB, t_on, 60.0)], QUIET)


def _device(
    name: str, geometry: TwoSupports | SingleScale, seed: int = 1, t_on: float = 0.5
) -> SimDevice:
    return make_device(builtin_definition(name), _timeline(geometry, t_on), seed=seed)


@pytest.fixture
def served(request: pytest.FixtureRequest, tmp_path: Path) -> Iterator[PtyDevice]:
    name, geometry = request.param
    with PtyDevice(_device(name, geometry), link=tmp_path / name) as pty:
        yield pty


def _open(path: str) -> serial.Serial:
    return serial.Serial(path, baudrate=115200, timeout=0.5)


def _lines_until(port: serial.Serial, done: object, limit_s: float = TIMEOUT_S) -> list[bytes]:
    """Read lines until ``done(lines)`` is true or the time limit passes."""
    lines: list[bytes] = []
    deadline = time.monotonic() + limit_s
    while time.monotonic() < deadline:
        line = port.readline()
        if line:
            lines.append(line)
            if done(lines):  # type: ignore[operator]
                return lines
    raise AssertionError(f"condition not met within {limit_s} s; last lines: {lines[-5:]}")


@pytest.mark.parametrize("served", [("beam", TwoSupports())], indirect=True)
def test_beam_over_pty_hello_samples_and_commands(served: PtyDevice) -> None:
    assert Path(served.path).resolve() == Path(served.port)
    with _open(served.path) as port:
        lines = _lines_until(port, lambda ls: sum(x.startswith(b"$") for x in ls) >= 5)
        assert any(x.startswith(b"#HELLO heft-beam/1 ") for x in lines)
        port.write(b"!ID\n")
        lines = _lines_until(port, lambda ls: any(x.startswith(b"#HELLO") for x in ls))
        assert b"#OK ID*2CCC\n" in lines
        port.write(b"!RATE 10\r\n")
        lines = _lines_until(port, lambda ls: any(b" rate=10 " in x for x in ls))
        assert any(x.startswith(b"#OK RATE 10*") for x in lines)
        port.write(b"!REBOOT\n")
        lines = _lines_until(port, lambda ls: any(x.startswith(b"#HELLO") for x in ls))
        assert any(x.startswith(b"#OK REBOOT*") for x in lines)
        assert b"heft-beam boot\r\n" in lines
        lines = _lines_until(port, lambda ls: any(x.startswith(b"$") for x in ls))
        assert lines[-1].startswith(b"$0,")
    assert served.commands_received == 3
    assert served.error is None


@pytest.mark.parametrize("served", [("poll_balance", SingleScale())], indirect=True)
def test_poll_balance_over_pty(served: PtyDevice) -> None:
    with _open(served.path) as port:
        deadline = time.monotonic() + TIMEOUT_S
        reply = b""
        while time.monotonic() < deadline:  # poll until the club has settled
            port.write(b"SI\r\n")
            reply = port.readline()
            if reply == b"S S     390.00 g\r\n":
                break
            time.sleep(0.1)
        assert reply == b"S S     390.00 g\r\n"
        port.write(b"S\r\n")
        assert port.readline() == b"S S     390.00 g\r\n"
        port.write(b"T\r\n")
        assert port.readline() == b"T S     390.00 g\r\n"
        port.write(b"@\r\n")
        assert port.readline() == b'I4 A "PB22-004417"\r\n'
        port.write(b"HELLO\r\n")
        assert port.readline() == b"ES\r\n"


@pytest.mark.parametrize("served", [("beam", TwoSupports())], indirect=True)
def test_unplug_gives_the_client_an_error_and_replug_reuses_the_link(served: PtyDevice) -> None:
    link = Path(served.path)
    first_port = served.port
    with _open(served.path) as port:
        _lines_until(port, lambda ls: any(x.startswith(b"$") for x in ls))
        served.unplug()
        assert not link.exists()  # like a USB by-id link, it goes away with the device
        # pyserial on a pty whose master closed: read raises SerialException (select says
        # readable, the read returns no bytes); write raises SerialException (EIO).
        with pytest.raises(serial.SerialException):
            for _ in range(50):  # drain what was already buffered, then the error
                port.read(4096)
        with pytest.raises(serial.SerialException):
            port.write(b"!ID\n")
    with pytest.raises(serial.SerialException):
        _open(str(link))
    served.replug()
    assert link.is_symlink() and Path(served.port).exists()
    assert served.port == str(link.resolve())
    with _open(str(link)) as port:
        lines = _lines_until(port, lambda ls: sum(x.startswith(b"$") for x in ls) >= 3)
        assert any(x.startswith(b"#HELLO heft-beam/1") for x in lines)  # it booted again
    assert first_port  # (the new /dev/pts/N may or may not reuse the old number)


def test_pty_frames_equal_the_virtual_time_frames(tmp_path: Path) -> None:
    """Real time only decides when bytes go out, not which bytes: same seed, same stream.

    pyserial flushes the input buffer when it opens a port, so the client starts somewhere in
    the stream; what it reads must be a contiguous run of the virtual-time lines.
    """
    virtual = _device("stream_balance", SingleScale(), seed=9)
    virtual.boot(0.0)
    expected = [f for _, f in virtual.advance(30.0)]
    device = _device("stream_balance", SingleScale(), seed=9)
    with PtyDevice(device, link=tmp_path / "sb") as pty, _open(pty.path) as port:
        got = _lines_until(port, lambda ls: len(ls) >= 25)
    run = got[1:]  # got[0] may be the tail of a line cut by the flush
    starts = [i for i in range(len(expected)) if expected[i:i + len(run)] == run]
    assert starts, f"{run[:3]} ... is not a run of the virtual-time stream"
    assert any(line.startswith(b"US,") for line in got)  # the club landed while we read


def test_silent_device_over_pty(tmp_path: Path) -> None:
    with PtyDevice(_device("beam", TwoSupports()), link=tmp_path / "b") as pty, \
            _open(pty.path) as port:
        _lines_until(port, lambda ls: any(x.startswith(b"$") for x in ls))
        with pty.locked() as dev:
            dev.silent = True
        time.sleep(0.2)
        port.reset_input_buffer()
        time.sleep(0.3)
        assert port.read(100) == b""
        with pty.locked() as dev:
            dev.silent = False
        assert _lines_until(port, lambda ls: any(x.startswith(b"$") for x in ls))


def test_usable_from_asyncio(tmp_path: Path) -> None:
    async def main() -> bytes:
        scanner = _device("scanner", SingleScale(), t_on=1.5)
        async with PtyDevice(scanner, link=tmp_path / "sc") as pty:
            with _open(pty.path) as port:
                port.timeout = TIMEOUT_S
                return await asyncio.to_thread(port.readline)

    # The club lands at 1.5 s and the scanner scans it 1 s ahead.
    assert asyncio.run(main()) == b"LCW-0042\r\n"


# --- end to end: pty -> pyserial -> the drivers' own parsers ----------------------------------


def _feed_until(driver_name: str, device: SimDevice, options: dict[str, object] | None,
                want: object, tmp_path: Path) -> list[object]:
    """Drive the real driver as a session would: its open string, its polls, its feed."""
    driver = create_driver(driver_name, device.name, options)
    outputs: list[object] = []
    with PtyDevice(device, link=tmp_path / device.name) as pty, _open(pty.path) as port:
        port.timeout = 0.1
        hello = driver.on_open()
        if hello:
            port.write(hello)
        deadline = time.monotonic() + TIMEOUT_S
        while time.monotonic() < deadline:
            request = driver.poll_request()
            if request:
                port.write(request)
            data = port.read(4096)
            outputs.extend(driver.feed(data, time.monotonic()))
            if want(outputs):  # type: ignore[operator]
                assert driver.stats.frame_errors == 0, driver.stats.last_error
                return outputs
    raise AssertionError(f"driver {driver_name}: not satisfied; stats {driver.stats}")


def _stable_grams(outputs: list[object]) -> list[float]:
    return [o.value for o in outputs
            if isinstance(o, Reading) and o.kind is ValueKind.GRAMS and Flag.STABLE in o.flags]


def test_end_to_end_beam_driver_reads_counts_and_hello(tmp_path: Path) -> None:
    dev = _device("beam", TwoSupports())
    outputs = _feed_until("beam", dev, None, lambda out: sum(
        isinstance(o, Reading) for o in out) >= 300, tmp_path)
    infos = [o for o in outputs if isinstance(o, DeviceInfo)]
    assert infos and infos[0].channels == 2 and infos[0].adc_bits == 24
    readings = [o for o in outputs if isinstance(o, Reading)]
    assert all(r.kind is ValueKind.COUNTS for r in readings)
    d = builtin_definition("beam")
    last = {r.channel: r for r in readings[-2:]}
    chans = d.channels  # type: ignore[union-attr]
    grams = {ch: (last[ch].value - chans[ch].offset_counts) / chans[ch].counts_per_g
             for ch in (0, 1)}
    # Settled on 79.22 g and 310.78 g (two-support statics, see test_sim_physics); noise 0.05 g.
    assert grams[0] == pytest.approx(79.21875, abs=0.5)
    assert grams[1] == pytest.approx(310.78125, abs=0.5)


def test_end_to_end_stream_balance_driver(tmp_path: Path) -> None:
    outputs = _feed_until("stream_balance", _device("stream_balance", SingleScale()), None,
                          lambda out: len(_stable_grams(out)) >= 3
                          and abs(_stable_grams(out)[-1] - 390) < 0.05, tmp_path)
    assert _stable_grams(outputs)[-1] == pytest.approx(390.0, abs=0.02)


def test_end_to_end_poll_balance_driver(tmp_path: Path) -> None:
    outputs = _feed_until("poll_balance", _device("poll_balance", SingleScale()),
                          {"mode": "continuous"},
                          lambda out: len(_stable_grams(out)) >= 3
                          and abs(_stable_grams(out)[-1] - 390) < 0.05, tmp_path)
    assert _stable_grams(outputs)[-1] == pytest.approx(390.0, abs=0.02)


def test_end_to_end_regex_line_driver_with_the_definitions_own_options(tmp_path: Path) -> None:
    d = builtin_definition("regex_line")
    assert isinstance(d, RegexLineDef)
    dev = make_device(d, _timeline(SingleScale()), seed=1)
    outputs = _feed_until("regex_line", dev, d.driver_options,
                          lambda out: len(_stable_grams(out)) >= 2
                          and abs(_stable_grams(out)[-1] - 390) < 0.15, tmp_path)
    assert _stable_grams(outputs)[-1] == pytest.approx(390.0, abs=0.15)  # 0.1 g display


def test_end_to_end_scanner_driver(tmp_path: Path) -> None:
    outputs = _feed_until("scanner", _device("scanner", SingleScale(), t_on=1.5), None,
                          lambda out: any(isinstance(o, ClubTag) for o in out), tmp_path)
    tags = [o for o in outputs if isinstance(o, ClubTag)]
    assert tags[0].club_id == "LCW-0042"


def test_a_club_placed_and_lifted_live_on_two_scales_sharing_one_bench_clock(
    tmp_path: Path,
) -> None:
    """Two stream balances under the two supports of one bench, one shared clock and script."""
    bench = BenchTimeline(TwoSupports(4.0, 36.0), [], QUIET)
    base = builtin_definition("stream_balance").model_copy(update={"noise_g": 0.0})
    butt = make_device(base.model_copy(update={"name": "butt", "bench_channel": 0}), bench)
    head = make_device(base.model_copy(update={"name": "head", "bench_channel": 1}), bench)
    origin = time.monotonic()
    with PtyDevice(butt, link=tmp_path / "butt", origin_s=origin) as pa, \
            PtyDevice(head, link=tmp_path / "head", origin_s=origin) as pb, \
            _open(pa.path) as port_a, _open(pb.path) as port_b:
        bench.place(CLUB, pa.bench_time_s() + 0.1)

        def settled_on(value: bytes) -> object:
            return lambda ls: ls[-1].startswith(b"ST,GS,+00" + value)

        # Two-support statics (test_sim_physics): 79.21875 g and 310.78125 g.
        assert _lines_until(port_a, settled_on(b"079.22"))
        assert _lines_until(port_b, settled_on(b"310.78"))
        bench.lift(pa.bench_time_s())
        assert _lines_until(port_a, settled_on(b"000.00"))
        assert _lines_until(port_b, settled_on(b"000.00"))
    with pytest.raises(ValueError, match="no club on the bench"):
        bench.bump(pa.bench_time_s(), 10.0)
