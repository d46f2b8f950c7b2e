"""Shared parts of the pipeline and fleet benchmarks and the fault drills.

Everything here is real: simulated beams on pseudo-terminals (``drivers.sim``), ``heft run`` as a
child process, Mosquitto on a free loopback port (``tests.mqtt_broker``), SQLite files on disk.

Clocks: ``time.monotonic()`` is Linux's ``CLOCK_MONOTONIC``, one clock for every process on the
machine. A frame's write time taken here, the arrival stamp the service puts on a reading
(``t_mono_s`` in live payloads, ``t`` in measurements) and a subscriber's receive time are
therefore on the same clock and can be subtracted across processes.
"""

from __future__ import annotations

import asyncio
import contextlib
import json
import math
import os
import platform
import signal
import subprocess
import sys
import threading
import time
import uuid
from collections.abc import AsyncIterator, Callable, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import aiomqtt
from paho.mqtt.packettypes import PacketTypes
from paho.mqtt.properties import Properties

from heft.drivers.sim.definitions import BeamDef, builtin_definition
from heft.drivers.sim.devices import Frame, make_device
from heft.drivers.sim.physics import BenchTimeline, Club, Placement, cycle_placements, make_geometry
from heft.drivers.sim.pty_server import PtyDevice
from tests.mqtt_broker import Broker, find_mosquitto, free_port
from tests.processes import stop_processes

REPO = Path(__file__).resolve().parents[2]
# Invented demo club (Larkspur Clubworks 7-iron): 415 g, balance point 28.85 in.
DEMO_CLUB = Club(415.0, 28.85, "LCW-7i-0001")
CLK_TCK = os.sysconf("SC_CLK_TCK")


# --------------------------------------------------------------------------- statistics


def percentile(values: Sequence[float], q: float) -> float:
    """Linear-interpolated percentile (q in 0..100); NaN for no values."""
    if not values:
        return math.nan
    s = sorted(values)
    pos = (len(s) - 1) * q / 100.0
    lo = math.floor(pos)
    hi = min(lo + 1, len(s) - 1)
    return s[lo] + (s[hi] - s[lo]) * (pos - lo)


def ms(value_s: float) -> str:
    return "n/a" if math.isnan(value_s) else f"{value_s * 1000:.2f}"


# --------------------------------------------------------------------------- the machine


def machine_summary() -> dict[str, str]:
    """What the figures came from: cores, memory, CPU model, Python, Mosquitto."""
    model = "unknown"
    with contextlib.suppress(OSError), Path("/proc/cpuinfo").open() as f:
        for line in f:
            if line.startswith("model name"):
                model = line.split(":", 1)[1].strip()
                break
    mem_kb = 0
    with contextlib.suppress(OSError), Path("/proc/meminfo").open() as f:
        for line in f:
            if line.startswith("MemTotal:"):
                mem_kb = int(line.split()[1])
                break
    try:
        out = subprocess.run([find_mosquitto(), "-h"], capture_output=True, text=True, timeout=5)
        mosq = (out.stdout or out.stderr).splitlines()[0].strip()
    except (OSError, RuntimeError, subprocess.SubprocessError, IndexError):
        mosq = "unknown"
    return {
        "cores (nproc)": str(os.cpu_count()),
        "memory": f"{mem_kb / 1024 / 1024:.1f} GiB",
        "cpu": model,
        "python": platform.python_version(),
        "broker": mosq,
        "kernel": platform.release(),
    }


def print_machine() -> None:
    print("machine: " + "; ".join(f"{k} {v}" for k, v in machine_summary().items()))


# --------------------------------------------------------------------------- processes


def proc_cpu_s(pid: int) -> float:
    """User + system CPU seconds of a process (from /proc/<pid>/stat)."""
    text = Path(f"/proc/{pid}/stat").read_text()
    fields = text[text.rindex(")") + 2 :].split()
    return (int(fields[11]) + int(fields[12])) / CLK_TCK


def proc_status_mb(pid: int, key: str) -> float:
    """A memory line of /proc/<pid>/status in MB (VmRSS now, VmHWM the peak so far)."""
    for line in Path(f"/proc/{pid}/status").read_text().splitlines():
        if line.startswith(key + ":"):
            return int(line.split()[1]) / 1024.0
    return math.nan


@dataclass
class CpuMeter:
    """CPU share of one process over a window: (cpu seconds used) / (wall seconds)."""

    pid: int
    t0: float = 0.0
    cpu0: float = 0.0

    def start(self) -> None:
        self.t0, self.cpu0 = time.monotonic(), proc_cpu_s(self.pid)

    def share(self) -> float:
        """Fraction of one core since ``start()``."""
        return (proc_cpu_s(self.pid) - self.cpu0) / max(1e-9, time.monotonic() - self.t0)


class HeftRun:
    """``heft run --config FILE`` as a child process (stderr to a log file)."""

    def __init__(self, config: Path, log: Path, *, extra: Sequence[str] = ()) -> None:
        self.config = config
        self.log = log
        self.extra = list(extra)
        self.proc: subprocess.Popen[bytes] | None = None

    def start(self) -> HeftRun:
        log = self.log.open("ab")
        self.proc = subprocess.Popen(
            [sys.executable, "-m", "heft.tui.cli", "run", "--config", str(self.config),
             "--log-level", "info", *self.extra],
            stdout=subprocess.DEVNULL, stderr=log, cwd=REPO,
        )
        log.close()
        return self

    @property
    def pid(self) -> int:
        assert self.proc is not None
        return self.proc.pid

    @property
    def running(self) -> bool:
        return self.proc is not None and self.proc.poll() is None

    def kill9(self) -> None:
        if self.proc is not None and self.proc.poll() is None:
            self.proc.send_signal(signal.SIGKILL)
            self.proc.wait(timeout=10)

    def stop(self, timeout_s: float = 10.0) -> int | None:
        """SIGTERM (an orderly stop), then SIGKILL if it does not end in time."""
        if self.proc is None:
            return None
        stop_processes([self.proc], timeout_s)
        return self.proc.returncode


def start_broker(workdir: Path, extra_conf: str = "") -> Broker:
    workdir.mkdir(parents=True, exist_ok=True)
    broker = Broker(workdir=workdir, port=free_port(), extra_conf=extra_conf)
    broker.start()
    return broker


def persistent_broker(workdir: Path) -> Broker:
    """A broker that keeps sessions and queued QoS 1 messages across its own restart."""
    data = workdir / "mosquitto-data"
    data.mkdir(parents=True, exist_ok=True)
    data.chmod(0o777)  # mosquitto may drop to its own user when started as root
    return start_broker(workdir, f"persistence true\npersistence_location {data}/\n")


# --------------------------------------------------------------------------- simulated beams


def beam_definition(name: str, *, rate_hz: float = 80, serial: str = "LCW-B0001") -> BeamDef:
    """The shipped two-channel beam (supports at 4 in and 36 in), renamed and re-rated."""
    d = builtin_definition("beam")
    assert isinstance(d, BeamDef)
    return d.model_copy(update={"name": name, "rate_hz": rate_hz, "serial_number": serial})


def demo_plan(
    *, count: int, period_s: float, on_s: float, start_s: float = 1.0, club: Club = DEMO_CLUB
) -> list[Placement]:
    return cycle_placements(club, period_s=period_s, on_s=on_s, count=count, start_s=start_s)


@dataclass
class FrameLog:
    """Every frame a simulated device sent: when it was due, when the write had returned.

    ``PtyDevice`` writes each frame at its due time on the bench clock and calls ``on_frame``
    after the write. ``due_mono`` (the due time on the monotonic clock) is when the bytes were
    meant to leave; the write happened between that and ``logged_mono`` (a late wake-up of the
    simulator thread shows as ``logged - due``).
    """

    frames: list[tuple[float, float, bytes]] = field(default_factory=list)  # logged, due, data
    t0: float = 0.0  # monotonic time of bench time 0

    def on_frame(self, frame: Frame) -> None:
        self.frames.append((time.monotonic(), frame[0], frame[1]))

    def attach(self, pty: PtyDevice) -> None:
        self.t0 = time.monotonic() - pty.bench_time_s()

    def due_mono(self, due_bench_s: float) -> float:
        return self.t0 + due_bench_s


def serve_beam(
    definition: BeamDef,
    plan: Sequence[Placement],
    link: Path,
    *,
    seed: int = 7,
    log: FrameLog | None = None,
) -> PtyDevice:
    """A simulated beam on a pty behind the stable symlink ``link``, already serving."""
    timeline = BenchTimeline(make_geometry("two_support"), list(plan))
    device = make_device(definition, timeline, seed=seed)
    pty = PtyDevice(device, link=link, on_frame=log.on_frame if log else None).start()
    if log is not None:
        log.attach(pty)
    return pty


# --------------------------------------------------------------------------- station configs


def station_toml(
    *,
    station: str,
    db: Path,
    devices: Sequence[tuple[str, str]],
    mqtt_port: int | None,
    topic_root: str,
    calibration: BeamDef,
    live_max_rate_hz: float = 5.0,
    preset: str = "hx711_80hz",
    keepalive_s: int = 5,
) -> str:
    """A two-support station on the first device's two channels; the other devices are read too.

    ``devices`` are (name, port) pairs of beams. The geometry's channels take their calibration
    from ``calibration`` (the simulated beam's own offsets and counts per gram).
    """
    first = devices[0][0]
    ch0, ch1 = calibration.channels[0], calibration.channels[1]
    parts = [f'station = "{station}"', 'job = "larkspur-irons"', "", "[storage]",
             f'path = "{db}"', ""]
    for name, port in devices:
        parts += ["[[devices]]", f'name = "{name}"', 'driver = "beam"', f'port = "{port}"',
                  "baudrate = 115200", ""]
    parts += [
        "[geometry]", 'type = "two_support"', f'channel_a = "{first}/0"', 'position_a_in = "4in"',
        f'channel_b = "{first}/1"', 'position_b_in = "36in"', "",
        f'[channels."{first}/0"]', 'source = "config"', f"zero_counts = {ch0.offset_counts}",
        f"counts_per_g = {ch0.counts_per_g}", "",
        f'[channels."{first}/1"]', 'source = "config"', f"zero_counts = {ch1.offset_counts}",
        f"counts_per_g = {ch1.counts_per_g}", "",
        "[capture]", f'preset_name = "{preset}"', "capacity_g = 5000", "",
        "[specs.irons-d2]", 'swingweight = "D2"', "tolerance_points = 0.5", "",
        "[jobs.larkspur-irons]", 'spec = "irons-d2"', "",
    ]
    if mqtt_port is None:
        parts += ["[mqtt]", "enabled = false"]
    else:
        parts += ["[mqtt]", "enabled = true", 'host = "127.0.0.1"', f"port = {mqtt_port}",
                  f'topic_root = "{topic_root}"', f"keepalive_s = {keepalive_s}",
                  f"live_max_rate_hz = {live_max_rate_hz}"]
    return "\n".join(parts) + "\n"


def unique_root(prefix: str) -> str:
    return f"{prefix}-{uuid.uuid4().hex[:8]}"


# --------------------------------------------------------------------------- MQTT listener


@dataclass
class Received:
    t_mono_s: float
    topic: str
    payload: bytes
    t_wall_s: float = 0.0  # time.time() at arrival (to compare with payloads' time_utc)

    def json(self) -> Any:
        return json.loads(self.payload)


@dataclass
class Listener:
    """Every message on some filters with its receive time; reconnects while the broker is away.

    With ``persistent`` the session survives disconnects (MQTT 5 session expiry), so QoS 1
    messages published while this listener is away are queued for it by the broker.
    """

    broker: Broker
    filters: Sequence[str]
    persistent: bool = False
    identifier: str = field(default_factory=lambda: f"bench-listener-{uuid.uuid4().hex[:8]}")
    messages: list[Received] = field(default_factory=list)
    connected: asyncio.Event = field(default_factory=asyncio.Event)
    client: aiomqtt.Client | None = None

    def on(self, suffix: str) -> list[Received]:
        return [m for m in self.messages if m.topic.endswith(suffix)]

    async def _loop(self) -> None:
        props = None
        if self.persistent:
            props = Properties(PacketTypes.CONNECT)  # type: ignore[no-untyped-call]
            props.SessionExpiryInterval = 3600
        first = True
        while True:
            try:
                async with aiomqtt.Client(
                    self.broker.host, self.broker.port, identifier=self.identifier,
                    protocol=aiomqtt.ProtocolVersion.V5,
                    clean_start=first or not self.persistent, properties=props, keepalive=5,
                ) as client:
                    self.client = client
                    first = False
                    for f in self.filters:
                        await client.subscribe(f, qos=1)
                    self.connected.set()
                    async for msg in client.messages:
                        payload = msg.payload
                        data = payload if isinstance(payload, bytes) else str(payload).encode()
                        self.messages.append(
                            Received(time.monotonic(), str(msg.topic), data, time.time())
                        )
            except aiomqtt.MqttError:
                self.connected.clear()
                self.client = None
                await asyncio.sleep(0.2)

    @contextlib.asynccontextmanager
    async def running(self) -> AsyncIterator[Listener]:
        task = asyncio.create_task(self._loop())
        try:
            await asyncio.wait_for(self.connected.wait(), timeout=20)
            yield self
        finally:
            task.cancel()
            with contextlib.suppress(asyncio.CancelledError):
                await task


async def wait_for(
    condition: Callable[[], bool], timeout_s: float, what: str, poll_s: float = 0.05
) -> float:
    """Poll until ``condition`` holds; returns the monotonic time it first held.

    Raises TimeoutError naming ``what`` after ``timeout_s`` (every wait here is bounded).
    """
    deadline = time.monotonic() + timeout_s
    while not condition():
        if time.monotonic() > deadline:
            raise TimeoutError(f"timed out after {timeout_s:g} s waiting for {what}")
        await asyncio.sleep(poll_s)
    return time.monotonic()


def spin_thread(target: Callable[[], None], name: str) -> threading.Thread:
    t = threading.Thread(target=target, name=name, daemon=True)
    t.start()
    return t


def print_table(headers: Sequence[str], rows: Sequence[Sequence[object]]) -> None:
    """A plain-text table (also valid Markdown)."""
    cells = [[str(h) for h in headers]] + [[str(c) for c in r] for r in rows]
    widths = [max(len(r[i]) for r in cells) for i in range(len(headers))]
    line = "| " + " | ".join(h.ljust(w) for h, w in zip(cells[0], widths, strict=True)) + " |"
    print(line)
    print("|" + "|".join("-" * (w + 2) for w in widths) + "|")
    for r in cells[1:]:
        print("| " + " | ".join(c.ljust(w) for c, w in zip(r, widths, strict=True)) + " |")
