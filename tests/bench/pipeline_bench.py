"""Pipeline benchmark: four 80 samples/s beams on ptys -> ``heft run`` -> Mosquitto -> subscriber.

Run: ``.venv/bin/python -m tests.bench.pipeline_bench`` (``--seconds S`` per latency phase,
``--json``). About three minutes on a 2-core machine.

What it measures, all in one run, side by side:

1. **Latency** (phase A, live readings published for every sample, ``live_max_rate_hz = 100``;
   phase B, the default 5/s throttle; both with Mosquitto's ``set_tcp_nodelay true``; phase C
   as A with Mosquitto's defaults). Four simulated beams (two load cells each, 80 samples/s)
   are served on ptys by this process; ``heft run`` reads all four, the station's two-support
   geometry uses the first beam's two channels. A frame's departure is its due time: the
   simulator writes each frame when it falls due and reports it afterwards
   (``PtyDevice(on_frame=...)``), so a late simulator thread is counted against heft. A
   subscriber here timestamps every message on arrival. All clocks are ``CLOCK_MONOTONIC``
   (one clock machine-wide).

   * live reading latency = receive time - departure of the frame it came from; the frame is
     found by content (the grams in the payload are the frame's counts through the channel's
     calibration, exactly), so a backlog could not hide behind a wrong match;
   * measurement latency = receive time - departure of the frame that completed the capture
     (the measurement's ``t`` is that frame's arrival stamp; the frame is the last one due
     before it). This includes the SQLite commit with ``synchronous=FULL`` (an fsync) that must
     finish before anything is published;
   * the bare broker round trip: in the same seconds a probe client publishes payloads of a
     measurement's size at QoS 1 and of a live reading's size at QoS 0 to the same broker, and
     the same subscriber times them (send time in the payload).

   Added latency = pipeline percentile - bare round-trip percentile of the same QoS.
2. **CPU and memory** of the ``heft run`` process: CPU seconds over the steady window divided
   by wall time (1.0 = one core of two), peak RSS (``VmHWM``) from /proc.
3. **Ingest headroom**: a pty that sends valid beam frames as fast as its reader drains them
   (``tests.bench.flood``). Bare pyserial (``readline()`` loop; and reading chunks) in a child
   process against ``heft run`` with the same source. heft's rate is what its pipeline
   processed (the per-second sample rate it reports on ``S/device/<name>``); the flood figure is
   then confirmed by a paced run at 90 % of it, which must be kept up with.

Targets (issue 6): <= 5 ms p99 added over the broker round trip; >= 0.5 x bare readline
throughput; RSS <= 80 MB.
"""

from __future__ import annotations

import argparse
import asyncio
import bisect
import contextlib
import json
import math
import statistics
import subprocess
import sys
import tempfile
import time
import uuid
from dataclasses import dataclass, field
from datetime import datetime
from pathlib import Path
from typing import Any

import aiomqtt

from heft.daemon.measurement import Measurement
from heft.daemon.storage import Store
from heft.drivers.sim.definitions import BeamDef
from tests.bench.flood import FloodPty, beam_frames
from tests.bench.rig import (
    CpuMeter,
    FrameLog,
    HeftRun,
    Listener,
    beam_definition,
    demo_plan,
    machine_summary,
    ms,
    percentile,
    print_machine,
    print_table,
    proc_status_mb,
    serve_beam,
    start_broker,
    station_toml,
    unique_root,
    wait_for,
)

DEVICES = 4
RATE_HZ = 80
STATION = "bench-1"
TARGET_ADDED_P99_S = 0.005
TARGET_THROUGHPUT_RATIO = 0.5
TARGET_RSS_MB = 80.0
PROBE_EVERY_S = 0.05
# Mosquitto's own Nagle switch (off by default): without it the broker holds small messages to
# a subscriber until the subscriber ACKs earlier ones. Phase C shows the defaults.
BROKER_NODELAY = "set_tcp_nodelay true\n"


@dataclass
class LatencyResult:
    name: str
    live_rate_hz: float
    live_s: list[float] = field(default_factory=list)
    live_arrival_s: list[float] = field(default_factory=list)  # frame write -> service stamp
    live_link_s: list[float] = field(default_factory=list)  # service stamp -> MQTT link
    live_unmatched: int = 0
    meas_s: list[float] = field(default_factory=list)
    probe_q1_s: list[float] = field(default_factory=list)
    probe_q0_s: list[float] = field(default_factory=list)
    cpu_share: float = math.nan
    peak_rss_mb: float = math.nan
    meas_payload_bytes: float = math.nan
    sample_measurement: bytes = b""
    live_payload_bytes: float = math.nan
    frames_sent: int = 0
    sim_late_s: list[float] = field(default_factory=list)


def _sample_counts(frame: bytes) -> list[int] | None:
    if not frame.startswith(b"$"):
        return None
    body = frame[1 : frame.index(b"*")].split(b",")
    return [int(x) for x in body[2:]]


def _grams(definition: BeamDef, channel: int, counts: int) -> float:
    # The same arithmetic as daemon.calibration.counts_to_g with the config's values.
    ch = definition.channels[channel]
    return (counts - ch.offset_counts) / ch.counts_per_g


async def _probe(client: aiomqtt.Client, root: str, stop: asyncio.Event, size1: int) -> None:
    """Publish timed payloads: QoS 1 of a measurement's size, QoS 0 of a live reading's."""
    pad1 = "x" * size1
    pad0 = "x" * 160
    while not stop.is_set():
        now = time.monotonic()
        await client.publish(f"{root}/probe/q1", json.dumps({"t": now, "pad": pad1}), qos=1)
        now = time.monotonic()
        await client.publish(f"{root}/probe/q0", json.dumps({"t": now, "pad": pad0}), qos=0)
        with contextlib.suppress(TimeoutError):
            await asyncio.wait_for(stop.wait(), PROBE_EVERY_S)


async def latency_phase(
    work: Path, name: str, live_rate_hz: float, seconds: float, devices: int = DEVICES,
    broker_conf: str = BROKER_NODELAY,
) -> LatencyResult:
    result = LatencyResult(name, live_rate_hz)
    work.mkdir(parents=True, exist_ok=True)  # noqa: ASYNC240 (set-up, before timing)
    broker = start_broker(work / "broker", broker_conf)
    root = unique_root("bench")
    defs = [beam_definition(f"beam-{i + 1}", rate_hz=RATE_HZ, serial=f"LCW-B000{i + 1}")
            for i in range(devices)]
    # A club every 2.2 s (on for 1.5 s) from t = 4 s, after the service has started.
    plan = demo_plan(count=int(seconds / 2.2) + 8, period_s=2.2, on_s=1.5, start_s=4.0)
    log = FrameLog()
    ptys = [serve_beam(d, plan, work / d.name, seed=7 + i, log=log if i == 0 else None)
            for i, d in enumerate(defs)]
    config = work / "station.toml"
    config.write_text(station_toml(
        station=STATION, db=work / "heft.db",
        devices=[(d.name, str(work / d.name)) for d in defs],
        mqtt_port=broker.port, topic_root=root, calibration=defs[0],
        live_max_rate_hz=live_rate_hz,
    ))
    heft = HeftRun(config, work / "heft.log").start()
    base = f"{root}/{STATION}"
    listener = Listener(broker, [f"{base}/measurement", f"{base}/live/#", f"{root}/probe/#"])
    try:
        async with listener.running():
            await wait_for(lambda: any("/live/" in m.topic for m in listener.messages),
                           30, "the first live reading from heft run")
            await asyncio.sleep(2.0)  # let start-up settle
            cpu = CpuMeter(heft.pid)
            cpu.start()
            t_start = time.monotonic()
            stop = asyncio.Event()
            async with aiomqtt.Client(broker.host, broker.port,
                                      identifier=f"probe-{root}") as client:
                probe = asyncio.create_task(_probe(client, root, stop, 1800))
                await asyncio.sleep(seconds)
                stop.set()
                await probe
            result.cpu_share = cpu.share()
            result.peak_rss_mb = proc_status_mb(heft.pid, "VmHWM")
            t_end = time.monotonic()
            await asyncio.sleep(1.0)  # the last messages in flight
    finally:
        heft.stop()
        for p in ptys:
            await asyncio.to_thread(p.close)
        broker.stop()
    _analyse(result, defs[0], log, listener, t_start, t_end)
    return result


def _analyse(
    result: LatencyResult, definition: BeamDef, log: FrameLog, listener: Listener,
    t_start: float, t_end: float,
) -> None:
    wall_offset = time.time() - time.monotonic()
    # Departure = the frame's due time (the simulator writes at or just after it), so a late
    # simulator thread counts against heft, never for it.
    samples = [(log.due_mono(due), logged, c) for logged, due, data in log.frames
               if (c := _sample_counts(data)) is not None]
    result.frames_sent = len(samples)
    result.sim_late_s = [logged - due for due, logged, _ in samples]
    write_times = [t for t, _, _ in samples]
    by_value: list[dict[float, list[float]]] = [{}, {}]
    for t, _, counts in samples:
        for ch in (0, 1):
            by_value[ch].setdefault(_grams(definition, ch, counts[ch]), []).append(t)
    sizes_live: list[int] = []
    sizes_meas: list[int] = []
    for m in listener.messages:
        if not t_start <= m.t_mono_s <= t_end + 1.0:
            continue
        if m.topic.endswith("/probe/q1") or m.topic.endswith("/probe/q0"):
            sent = m.json()["t"]
            if t_start <= sent <= t_end:
                bucket = result.probe_q1_s if m.topic.endswith("q1") else result.probe_q0_s
                bucket.append(m.t_mono_s - sent)
        elif "/live/" in m.topic:
            body = m.json()
            sizes_live.append(len(m.payload))
            ch = int(m.topic.rsplit("/", 1)[1])
            times = by_value[ch].get(body["value_g"], [])
            arrival = body["t_mono_s"]
            i = bisect.bisect_right(times, arrival) - 1
            if i < 0:
                result.live_unmatched += 1
                continue
            result.live_s.append(m.t_mono_s - times[i])
            result.live_arrival_s.append(arrival - times[i])
            # time_utc is stamped when the MQTT link takes the reading off the event bus.
            taken = datetime.fromisoformat(body["time_utc"]).timestamp() - wall_offset
            result.live_link_s.append(taken - arrival)
        elif m.topic.endswith("/measurement"):
            body = m.json()
            sizes_meas.append(len(m.payload))
            result.sample_measurement = m.payload
            i = bisect.bisect_right(write_times, body["t"]) - 1
            if i >= 0:
                result.meas_s.append(m.t_mono_s - write_times[i])
    result.meas_payload_bytes = statistics.mean(sizes_meas) if sizes_meas else math.nan
    result.live_payload_bytes = statistics.mean(sizes_live) if sizes_live else math.nan


def commit_times(work: Path, payload: bytes, n: int = 100) -> list[float]:
    """Seconds per ``Store.add_measurement`` (WAL, synchronous=FULL) on the benchmark's disk."""
    template = Measurement.model_validate_json(payload)
    times: list[float] = []
    with Store(work / "commit-timing.db") as store:
        for seq in range(1, n + 1):
            m = template.model_copy(update={"id": uuid.uuid4(), "seq": seq})
            t0 = time.perf_counter()
            store.add_measurement(m)
            times.append(time.perf_counter() - t0)
    return times


# --------------------------------------------------------------------------- throughput


@dataclass
class ThroughputResult:
    readline_lps: float = math.nan
    chunks_lps: float = math.nan
    heft_flood_lps: float = math.nan
    heft_paced_offered_lps: float = math.nan
    heft_paced_lps: float = math.nan
    heft_paced_rss_start_mb: float = math.nan
    heft_paced_rss_end_mb: float = math.nan
    heft_cpu_share_flood: float = math.nan
    sustained_lps: float = math.nan


def _bare(frames: list[bytes], link: Path, mode: str, seconds: float) -> float:
    with FloodPty(frames, link):
        out = subprocess.run(
            [sys.executable, "-m", "tests.bench.readline_sink", str(link), str(seconds), mode],
            capture_output=True, text=True, timeout=seconds + 30, check=True,
        )
    data = json.loads(out.stdout.strip().splitlines()[-1])
    return float(data["lines"]) / float(data["seconds"])


async def _heft_rate(
    work: Path, frames: list[bytes], definition: BeamDef, rate_hz: float | None, seconds: float
) -> tuple[float, float, float, float, float]:
    """(processed lines/s, offered lines/s, cpu share, rss at start, rss at end)."""
    broker = start_broker(work / f"broker-{rate_hz}")
    root = unique_root("flood")
    link = work / f"flood-{rate_hz}"
    config = work / f"flood-{rate_hz}.toml"
    config.write_text(station_toml(
        station=STATION, db=work / f"flood-{rate_hz}.db", devices=[("flood-1", str(link))],
        mqtt_port=broker.port, topic_root=root, calibration=definition,
    ))
    topic = f"{root}/{STATION}/device/flood-1"
    listener = Listener(broker, [topic])
    try:
        with FloodPty(frames, link, rate_hz) as source:
            heft = HeftRun(config, work / f"flood-{rate_hz}.log").start()
            try:
                async with listener.running():
                    await wait_for(
                        lambda: any(m.json().get("sample_rate_hz") for m in listener.messages),
                        30, "heft run reading the flood port")
                    await asyncio.sleep(2.0)
                    cpu = CpuMeter(heft.pid)
                    cpu.start()
                    rss0 = proc_status_mb(heft.pid, "VmRSS")
                    t0, n0 = time.monotonic(), source.lines_sent
                    await asyncio.sleep(seconds)
                    offered = source.rate_since(t0, n0)
                    share = cpu.share()
                    rss1 = proc_status_mb(heft.pid, "VmRSS")
                    t1 = time.monotonic()
                    rates = [m.json()["sample_rate_hz"] for m in listener.messages
                             if t0 + 1.0 <= m.t_mono_s <= t1 and m.json().get("connected")
                             and m.json().get("sample_rate_hz") is not None]
            finally:
                heft.stop()
    finally:
        broker.stop()
    processed = statistics.mean(rates) if rates else math.nan
    return processed, offered, share, rss0, rss1


async def throughput(work: Path, seconds: float) -> ThroughputResult:
    work.mkdir(parents=True, exist_ok=True)  # noqa: ASYNC240 (set-up, before timing)
    definition = beam_definition("flood-1", rate_hz=RATE_HZ)
    frames = beam_frames(definition, 16384)
    r = ThroughputResult()
    r.readline_lps = await asyncio.to_thread(_bare, frames, work / "bare", "readline", seconds)
    r.chunks_lps = await asyncio.to_thread(_bare, frames, work / "bare2", "chunks", seconds)
    r.heft_flood_lps, _, r.heft_cpu_share_flood, _, _ = await _heft_rate(
        work, frames, definition, None, seconds)
    # Confirm: paced at 90 % of the flood figure, heft must keep up (processed ~ offered).
    for fraction in (0.9, 0.7, 0.5):
        rate = fraction * r.heft_flood_lps
        processed, offered, _, rss0, rss1 = await _heft_rate(
            work, frames, definition, rate, seconds)
        r.heft_paced_offered_lps, r.heft_paced_lps = offered, processed
        r.heft_paced_rss_start_mb, r.heft_paced_rss_end_mb = rss0, rss1
        if processed >= 0.98 * offered:
            r.sustained_lps = processed
            break
    return r


# --------------------------------------------------------------------------- report


def report(
    phases: list[LatencyResult], tp: ThroughputResult, commits: list[float]
) -> dict[str, Any]:
    print("\nLatency: simulated device -> heft run -> Mosquitto -> subscriber (ms)")
    rows: list[list[object]] = []
    summary: dict[str, Any] = {"machine": machine_summary(), "phases": [], "throughput": {}}
    for p in phases:
        q1_50, q1_99 = percentile(p.probe_q1_s, 50), percentile(p.probe_q1_s, 99)
        q0_50, q0_99 = percentile(p.probe_q0_s, 50), percentile(p.probe_q0_s, 99)
        m50, m99 = percentile(p.meas_s, 50), percentile(p.meas_s, 99)
        l50, l99 = percentile(p.live_s, 50), percentile(p.live_s, 99)
        rows += [
            [p.name, "bare broker QoS 1", len(p.probe_q1_s), ms(q1_50), ms(q1_99), "", ""],
            [p.name, "measurement (QoS 1)", len(p.meas_s), ms(m50), ms(m99),
             ms(m99 - q1_99), "yes" if m99 - q1_99 <= TARGET_ADDED_P99_S else "NO"],
            [p.name, "bare broker QoS 0", len(p.probe_q0_s), ms(q0_50), ms(q0_99), "", ""],
            [p.name, "live reading (QoS 0)", len(p.live_s), ms(l50), ms(l99),
             ms(l99 - q0_99), "yes" if l99 - q0_99 <= TARGET_ADDED_P99_S else "NO"],
            [p.name, "  device -> service arrival stamp", len(p.live_arrival_s),
             ms(percentile(p.live_arrival_s, 50)), ms(percentile(p.live_arrival_s, 99)), "", ""],
            [p.name, "  arrival stamp -> MQTT link", len(p.live_link_s),
             ms(percentile(p.live_link_s, 50)), ms(percentile(p.live_link_s, 99)), "", ""],
        ]
        summary["phases"].append({
            "name": p.name, "live_max_rate_hz": p.live_rate_hz, "cpu_share": p.cpu_share,
            "peak_rss_mb": p.peak_rss_mb, "measurements": len(p.meas_s),
            "meas_p50_ms": m50 * 1e3, "meas_p99_ms": m99 * 1e3, "meas_max_ms":
            max(p.meas_s, default=math.nan) * 1e3,
            "live": len(p.live_s), "live_unmatched": p.live_unmatched,
            "live_p50_ms": l50 * 1e3, "live_p99_ms": l99 * 1e3,
            "q1_p50_ms": q1_50 * 1e3, "q1_p99_ms": q1_99 * 1e3,
            "q0_p50_ms": q0_50 * 1e3, "q0_p99_ms": q0_99 * 1e3,
            "frames_sent_beam1": p.frames_sent,
        })
    print_table(["phase", "path", "n", "p50", "p99", "p99 added", "<= 5 ms"], rows)
    for p in phases:
        print(f"{p.name}: simulator write after its due time p50 "
              f"{ms(percentile(p.sim_late_s, 50))} / p99 {ms(percentile(p.sim_late_s, 99))} ms "
              "(counted as heft latency)")
        print(f"{p.name}: measurement max {ms(max(p.meas_s, default=math.nan))} ms; "
              f"live readings unmatched {p.live_unmatched}; payloads: measurement "
              f"{p.meas_payload_bytes:.0f} B, live {p.live_payload_bytes:.0f} B")

    print(f"SQLite commit of one measurement (WAL, synchronous=FULL) on the same disk, "
          f"n={len(commits)}: p50 {ms(percentile(commits, 50))} / p99 "
          f"{ms(percentile(commits, 99))} ms (part of every measurement's latency)")
    summary["commit_p50_ms"] = percentile(commits, 50) * 1e3
    summary["commit_p99_ms"] = percentile(commits, 99) * 1e3

    print("\nResources of the heft run process (4 beams x 2 channels x 80 samples/s)")
    print_table(
        ["phase", "CPU (share of one core)", "peak RSS MB", "RSS <= 80 MB"],
        [[p.name, f"{p.cpu_share:.3f}", f"{p.peak_rss_mb:.1f}",
          "yes" if p.peak_rss_mb <= TARGET_RSS_MB else "NO"] for p in phases],
    )

    print("\nIngest headroom: lines/s from one saturated pty (valid beam frames)")
    ratio = tp.sustained_lps / tp.readline_lps
    print_table(
        ["reader", "lines/s", "x bare readline"],
        [
            ["bare pyserial readline() loop", f"{tp.readline_lps:.0f}", "1.00"],
            ["bare pyserial read(in_waiting) + split", f"{tp.chunks_lps:.0f}",
             f"{tp.chunks_lps / tp.readline_lps:.2f}"],
            ["heft run, flood (processed)", f"{tp.heft_flood_lps:.0f}",
             f"{tp.heft_flood_lps / tp.readline_lps:.2f}"],
            [f"heft run, paced at {tp.heft_paced_offered_lps:.0f}/s (processed)",
             f"{tp.heft_paced_lps:.0f}", f"{tp.heft_paced_lps / tp.readline_lps:.2f}"],
            ["heft run, sustained", f"{tp.sustained_lps:.0f}", f"{ratio:.2f}"],
        ],
    )
    print(f"heft CPU share at flood {tp.heft_cpu_share_flood:.2f}; RSS during the paced run "
          f"{tp.heft_paced_rss_start_mb:.1f} -> {tp.heft_paced_rss_end_mb:.1f} MB; "
          f"target >= {TARGET_THROUGHPUT_RATIO} x bare readline: "
          f"{'met' if ratio >= TARGET_THROUGHPUT_RATIO else 'MISSED'}; "
          f"station need: {DEVICES * RATE_HZ} lines/s for four beams "
          f"({tp.sustained_lps / (DEVICES * RATE_HZ):.0f} x headroom)")
    summary["throughput"] = vars(tp) | {"ratio_vs_readline": ratio}
    return summary


async def main_async(args: argparse.Namespace) -> int:
    print_machine()
    with tempfile.TemporaryDirectory(prefix="heft-pipeline-bench-", dir="/var/tmp") as tmp:
        work = Path(tmp)
        print(f"phase A: every live reading published ({args.seconds:g} s) ...", flush=True)
        a = await latency_phase(work / "a", "A live 100/s", 100.0, args.seconds)
        print(f"phase B: default live throttle 5/s ({args.seconds:g} s) ...", flush=True)
        b = await latency_phase(work / "b", "B live 5/s", 5.0, args.seconds)
        print(f"phase C: as A, Mosquitto's default TCP settings ({args.seconds:g} s) ...",
              flush=True)
        c = await latency_phase(work / "c", "C as A, broker defaults", 100.0, args.seconds,
                                broker_conf="")
        print("ingest headroom ...", flush=True)
        tp = await throughput(work / "tp", args.tp_seconds)
        commits = commit_times(work, a.sample_measurement) if a.sample_measurement else []
    summary = report([a, b, c], tp, commits)
    if args.json:
        print(json.dumps(summary, default=float))
    return 0


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(prog="python -m tests.bench.pipeline_bench",
                                     description=__doc__.split("\n\n")[0] if __doc__ else "")
    parser.add_argument("--seconds", type=float, default=40.0, help="per latency phase")
    parser.add_argument("--tp-seconds", type=float, default=6.0, help="per throughput run")
    parser.add_argument("--json", action="store_true", help="also print a JSON summary")
    args = parser.parse_args(argv)
    return asyncio.run(main_async(args))


if __name__ == "__main__":
    sys.exit(main())
