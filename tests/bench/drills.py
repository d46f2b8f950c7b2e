"""Fault drills: a real station (simulated beam on a pty, ``heft run``, Mosquitto, SQLite) hurt
on purpose, and what it lost.

Run: ``.venv/bin/python -m tests.bench.drills`` (short versions, about 2 minutes) or
``--long`` (the soaks of issue 6: broker down 30 s and 5 min, 50 unplugs, 100,000 fuzzed frames
per driver, 100 kills; about 25 minutes). ``--only NAME`` runs one drill. CI runs the short
versions through ``tests/test_drills.py``.

Every drill reports:

* **lost**: measurements stored but never delivered to the subscriber, delivered but missing
  from the database, or placements the bench should have captured (the club lay on the beam
  entirely while device and service were up) with no measurement;
* **undetected duplicates**: one placement captured twice under two ids (a duplicate under the
  *same* id is harmless and counted separately as "re-deliveries");
* **integrity failures**: ``PRAGMA integrity_check`` not ``ok`` after the drill (after each kill
  in the kill drill);
* **detect** and **recover** times (median and max over the repetitions).

The subscriber keeps a persistent MQTT 5 session (as a plant historian would) on a broker with
persistence on, so what the broker accepted while the subscriber was away is still delivered.
"""

from __future__ import annotations

import argparse
import asyncio
import contextlib
import json
import logging
import os
import random
import re
import sqlite3
import subprocess
import sys
import tempfile
import time
from collections.abc import AsyncIterator, Callable, Sequence
from dataclasses import dataclass
from datetime import datetime
from functools import partial
from pathlib import Path
from typing import Any

from heft.daemon.storage import Store
from heft.drivers.sim.physics import Placement
from heft.drivers.sim.pty_server import PtyDevice
from tests.bench.drill_fuzz import fuzz
from tests.bench.drill_result import DrillResult, span_text
from tests.bench.rig import (
    HeftRun,
    Listener,
    beam_definition,
    demo_plan,
    persistent_broker,
    print_machine,
    print_table,
    serve_beam,
    station_toml,
    unique_root,
    wait_for,
)
from tests.mqtt_broker import Broker

STATION = "bench-1"
PERIOD_S = 2.6  # a club every 2.6 s, on the beam for 1.7 s
ON_S = 1.7
LOG_TIME = re.compile(r"^(\d{4}-\d\d-\d\d \d\d:\d\d:\d\d,\d{3}) ")


# --------------------------------------------------------------------------- a station


@dataclass
class Station:
    """One simulated beam, ``heft run`` on it, a broker and a persistent subscriber."""

    work: Path
    broker: Broker
    plan: list[Placement]
    pty: PtyDevice
    config: Path
    db: Path
    listener: Listener
    base: str
    heft: HeftRun | None = None
    runs: int = 0

    @property
    def t0(self) -> float:
        """Monotonic time of bench time 0 (the beam's clock)."""
        return time.monotonic() - self.pty.bench_time_s()

    def start_heft(self) -> HeftRun:
        self.runs += 1
        self.heft = HeftRun(self.config, self.work / "heft.log").start()
        return self.heft

    # -- what arrived -------------------------------------------------------------------

    def received(self) -> list[dict[str, Any]]:
        return [m.json() for m in self.listener.on("/measurement")]

    def device_states(self) -> list[tuple[float, bool]]:
        return [(m.t_mono_s, bool(m.json().get("connected")))
                for m in self.listener.messages if "/device/" in m.topic]

    def device_seen(self, after: float, connected: bool) -> bool:
        """Has a device status with this ``connected`` value arrived after ``after``?"""
        return any(t > after and c == connected for t, c in self.device_states())

    def bench_past(self, bench_t: float) -> bool:
        return time.monotonic() - self.t0 > bench_t

    def alarm_lists(self) -> list[tuple[float, set[str]]]:
        return [(m.t_mono_s, {a["kind"] for a in m.json().get("active", [])})
                for m in self.listener.on("/alarms")]

    def stored_ids(self) -> set[str]:
        with contextlib.closing(sqlite3.connect(f"file:{self.db}?mode=ro", uri=True)) as con:
            return {r[0] for r in con.execute("SELECT id FROM measurements")}

    def placement_index(self, t_mono: float) -> int | None:
        bench_t = t_mono - self.t0
        for i, p in enumerate(self.plan):
            if p.t_on_s <= bench_t <= p.t_off_s + 0.05:
                return i
        return None

    async def drain(self, timeout_s: float) -> None:
        """Wait until every stored measurement has reached the subscriber."""
        await wait_for(lambda: self.stored_ids() <= {m["id"] for m in self.received()},
                       timeout_s, "every stored measurement on MQTT")


@contextlib.asynccontextmanager
async def station(work: Path, plan: list[Placement], *, start: bool = True,
                  db_dir: Path | None = None) -> AsyncIterator[Station]:
    work.mkdir(parents=True, exist_ok=True)  # noqa: ASYNC240 (set-up)
    broker = persistent_broker(work / "broker")
    definition = beam_definition("beam")
    pty = serve_beam(definition, plan, work / "beam")
    root = unique_root("drill")
    db = (db_dir or work) / "heft.db"
    config = work / "station.toml"
    config.write_text(station_toml(
        station=STATION, db=db, devices=[("beam", str(work / "beam"))],
        mqtt_port=broker.port, topic_root=root, calibration=definition,
    ))
    base = f"{root}/{STATION}"
    listener = Listener(broker, [f"{base}/measurement", f"{base}/device/+", f"{base}/alarms",
                                 f"{base}/status"], persistent=True)
    st = Station(work, broker, plan, pty, config, db, listener, base)
    try:
        async with listener.running():
            if start:
                st.start_heft()
                await wait_for(lambda: any(c for _, c in st.device_states()), 40,
                               "heft run connected to the beam")
            yield st
    finally:
        if st.heft is not None:
            st.heft.stop()
        await asyncio.to_thread(pty.close)
        broker.stop()


def tally(st: Station, result: DrillResult, expected: Callable[[Placement], bool]) -> None:
    """Lost measurements and duplicates at the end of a drill (service stopped or idle)."""
    received = st.received()
    ids = [m["id"] for m in received]
    stored = st.stored_ids()
    distinct = set(ids)
    result.measurements = len(stored)
    result.redeliveries = len(ids) - len(distinct)
    result.lost += len(stored - distinct) + len(distinct - stored)
    by_placement: dict[int, set[str]] = {}
    seqs: dict[int, set[str]] = {}
    for m in received:
        seqs.setdefault(m["seq"], set()).add(m["id"])
        i = st.placement_index(m["t"]) if m.get("t") is not None else None
        if i is not None:
            by_placement.setdefault(i, set()).add(m["id"])
    result.undetected_duplicates += sum(len(v) - 1 for v in by_placement.values())
    result.undetected_duplicates += sum(len(v) - 1 for v in seqs.values())
    missed = [i for i, p in enumerate(st.plan) if expected(p) and i not in by_placement]
    if missed:
        result.lost += len(missed)
        result.notes.append(f"placements not captured: {missed}")


def integrity(db: Path) -> bool:
    with Store(db) as store:
        return store.integrity_check() == "ok"


def log_times(log: Path, needle: str, level: str = "") -> list[float]:
    """Monotonic times of heft log lines containing ``needle`` (the log stamps wall time)."""
    offset = time.time() - time.monotonic()
    out = []
    for line in log.read_text(errors="replace").splitlines():
        m = LOG_TIME.match(line)
        if m and needle in line and f" {level}" in line:
            wall = datetime.strptime(m.group(1), "%Y-%m-%d %H:%M:%S,%f").timestamp()
            out.append(wall - offset)
    return out


def window(t0: float, t1: float, margin_s: float = 0.0) -> Callable[[Placement], bool]:
    """Placements entirely inside bench times [t0 + margin, t1]."""
    return lambda p: p.t_on_s >= t0 + margin_s and p.t_off_s <= t1


# --------------------------------------------------------------------------- broker drills


async def broker_outage(work: Path, down_s: float, *, kill: bool) -> DrillResult:
    """The broker stops (SIGTERM, or SIGKILL) for ``down_s`` while clubs keep coming."""
    name = f"broker {'SIGKILL' if kill else 'down'} {down_s:g} s"
    result = DrillResult(name, repetitions=1)
    plan = demo_plan(count=int((down_s + 40) / PERIOD_S) + 4, period_s=PERIOD_S, on_s=ON_S,
                     start_s=4.0)
    async with station(work, plan) as st:
        await wait_for(lambda: len(st.received()) >= 1, 40, "the first measurement")
        bench_ready = min(m["t"] for m in st.received()) - st.t0
        t_stop = time.monotonic()
        await asyncio.to_thread(st.broker.stop, kill)
        await asyncio.sleep(down_s)
        stored_during = len(st.stored_ids())
        t_start = time.monotonic()
        await asyncio.to_thread(st.broker.start)
        await wait_for(lambda: any(m.t_mono_s > t_start and m.payload == b"online"
                                   for m in st.listener.on("/status")), 60, "station online")
        t_online = time.monotonic()
        await st.drain(60)
        t_drained = time.monotonic()
        await asyncio.sleep(PERIOD_S)  # a few clubs after the recovery
        await st.drain(30)
        bench_end = time.monotonic() - st.t0 - 1.0
        assert st.heft is not None
        st.heft.stop()
        # The link logs a warning naming MQTT when the connection drops or cannot be made.
        lost_seen = [t for t in log_times(st.work / "heft.log", "MQTT", level="WARNING")
                     if t >= t_stop - 0.01]
        if lost_seen:
            result.detect_s.append(min(lost_seen) - t_stop)
        result.recover_s.append(t_drained - t_start)
        result.notes.append(f"online again {t_online - t_start:.2f} s after the broker "
                            f"restarted; {stored_during} stored by the end of the outage")
        tally(st, result, window(bench_ready, bench_end))
        result.integrity_failures += 0 if integrity(st.db) else 1
    return result


# --------------------------------------------------------------------------- unplug


async def unplug_replug(work: Path, cycles: int) -> DrillResult:
    """Unplug the beam between placements, wait for the offline report, plug it back."""
    result = DrillResult(f"unplug/replug x{cycles}", repetitions=cycles)
    period = 4.5
    plan = demo_plan(count=cycles + 3, period_s=period, on_s=ON_S, start_s=4.0)
    async with station(work, plan) as st:
        first = plan[0]
        for k in range(cycles):
            p = plan[k]
            # Unplug just after club k has been lifted (it must already be measured).
            await wait_for(partial(st.bench_past, p.t_off_s + 0.15), period + 30,
                           "the club to be lifted")
            t_unplug = time.monotonic()
            await asyncio.to_thread(st.pty.unplug)
            t_down = await wait_for(partial(st.device_seen, t_unplug, False), 15,
                                    "device offline")
            result.detect_s.append(t_down - t_unplug)
            await asyncio.sleep(0.3)
            t_replug = time.monotonic()
            await asyncio.to_thread(st.pty.replug)
            t_up = await wait_for(partial(st.device_seen, t_replug, True), 30, "device back")
            result.recover_s.append(t_up - t_replug)
            if time.monotonic() - st.t0 > plan[k + 1].t_on_s:
                result.notes.append(f"cycle {k}: back only after club {k + 1} was placed")
        last = plan[cycles]
        await wait_for(partial(st.bench_past, last.t_off_s + 0.5), 30, "the last club")
        await st.drain(30)
        assert st.heft is not None
        st.heft.stop()
        tally(st, result, window(first.t_on_s, last.t_off_s))
        result.integrity_failures += 0 if integrity(st.db) else 1
    return result


# --------------------------------------------------------------------------- kill -9


async def kill_service(work: Path, kills: int, *, seed: int = 6) -> DrillResult:
    """SIGKILL ``heft run`` at random points of a capture burst, restart it, repeat."""
    result = DrillResult(f"kill -9 x{kills}", repetitions=kills)
    rng = random.Random(seed)
    plan = demo_plan(count=int(kills * 7.0 / PERIOD_S) + 12, period_s=PERIOD_S, on_s=ON_S,
                     start_s=4.0)
    dead: list[tuple[float, float]] = []  # bench-time spans without a running service
    async with station(work, plan) as st:
        for _ in range(kills):
            heft = st.heft
            assert heft is not None
            # Random point: 0.5 to 5 s after the service reported the beam connected.
            await asyncio.sleep(rng.uniform(0.5, 5.0))
            t_kill = time.monotonic()
            await asyncio.to_thread(heft.kill9)
            acknowledged = {m["id"] for m in st.received()}
            if not integrity(st.db):
                result.integrity_failures += 1
            missing = acknowledged - st.stored_ids()
            if missing:
                result.lost += len(missing)
                result.notes.append(f"acknowledged but not stored: {sorted(missing)}")
            t_restart = time.monotonic()
            st.start_heft()
            t_up = await wait_for(partial(st.device_seen, t_restart, True), 40,
                                  "restarted service up")
            result.recover_s.append(t_up - t_restart)
            dead.append((t_kill - st.t0, t_up - st.t0))
        await asyncio.sleep(PERIOD_S)
        await st.drain(40)
        bench_end = time.monotonic() - st.t0 - 1.0
        assert st.heft is not None
        st.heft.stop()

        def expected(p: Placement) -> bool:
            # The engine needs the club placed while the service runs (+1 s to start reading).
            return p.t_on_s >= plan[0].t_on_s and p.t_off_s <= bench_end and all(
                p.t_off_s < a or p.t_on_s > b + 1.0 for a, b in dead)

        tally(st, result, expected)
        result.integrity_failures += 0 if integrity(st.db) else 1
        result.notes.append(f"{st.runs} starts of heft run")
    return result


# --------------------------------------------------------------------------- disk full


def _can_mount_tmpfs(path: Path) -> bool:
    if os.geteuid() != 0:
        return False
    path.mkdir(parents=True, exist_ok=True)
    done = subprocess.run(["mount", "-t", "tmpfs", "-o", "size=4m", "tmpfs", str(path)],
                          capture_output=True, check=False)
    return done.returncode == 0


def _fill(path: Path) -> int:
    """Write zeros into ``path`` until the file system is full; returns bytes written."""
    n = 0
    block = b"\0" * 65536
    with path.open("wb", buffering=0) as f:
        while True:
            try:
                n += f.write(block) or 0
            except OSError:
                small = b"\0" * 512
                with contextlib.suppress(OSError):
                    while True:
                        n += f.write(small) or 0
                break
    return n


async def disk_full(work: Path, full_s: float) -> DrillResult:
    """The database's file system fills up (a 4 MB tmpfs) for ``full_s``, then frees again."""
    result = DrillResult(f"disk full {full_s:g} s (tmpfs)", repetitions=1)
    mnt = work / "dbfs"
    if not await asyncio.to_thread(_can_mount_tmpfs, mnt):
        result.notes.append("skipped: mounting a tmpfs needs root")
        return result
    try:
        plan = demo_plan(count=int((full_s + 40) / PERIOD_S) + 4, period_s=PERIOD_S, on_s=ON_S,
                         start_s=4.0)
        async with station(work, plan, db_dir=mnt) as st:
            await wait_for(lambda: len(st.received()) >= 2, 40, "the first measurements")
            bench_ready = min(m["t"] for m in st.received()) - st.t0
            filler = mnt / "filler"
            t_full = time.monotonic()
            await asyncio.to_thread(_fill, filler)
            t_alarm = await wait_for(lambda: any(
                t > t_full and "storage_failed" in kinds for t, kinds in st.alarm_lists()),
                full_s + 30, "the storage-failed alarm")
            result.detect_s.append(t_alarm - t_full)
            await asyncio.sleep(max(0.0, full_s - (t_alarm - t_full)))
            t_free = time.monotonic()
            await asyncio.to_thread(filler.unlink)
            t_clear = await wait_for(lambda: any(
                t > t_free and "storage_failed" not in kinds for t, kinds in st.alarm_lists()),
                60, "the storage-failed alarm cleared")
            await st.drain(60)
            t_drained = time.monotonic()
            result.recover_s.append(t_drained - t_free)
            result.notes.append(f"alarm cleared {t_clear - t_free:.2f} s after space returned")
            await asyncio.sleep(PERIOD_S)
            await st.drain(30)
            bench_end = time.monotonic() - st.t0 - 1.0
            assert st.heft is not None
            st.heft.stop()
            tally(st, result, window(bench_ready, bench_end))
            result.integrity_failures += 0 if integrity(st.db) else 1
    finally:
        await asyncio.to_thread(subprocess.run, ["umount", "-l", str(mnt)], check=False,
                                capture_output=True)
    return result


# --------------------------------------------------------------------------- runner


async def _command_flood(work: Path, duration_s: float) -> DrillResult:
    from tests.bench.command_flood import command_flood  # it builds on this module

    return await command_flood(work, duration_s)


SHORT: dict[str, Callable[[Path], Any]] = {
    "broker-down": lambda w: broker_outage(w, 5.0, kill=False),
    "broker-kill": lambda w: broker_outage(w, 3.0, kill=True),
    "unplug": lambda w: unplug_replug(w, 4),
    "kill": lambda w: kill_service(w, 3),
    "disk-full": lambda w: disk_full(w, 4.0),
    "command-flood": lambda w: _command_flood(w, 20.0),
}
LONG: dict[str, Callable[[Path], Any]] = {
    "broker-down": lambda w: broker_outage(w, 30.0, kill=False),
    "broker-down-5min": lambda w: broker_outage(w, 300.0, kill=False),
    "broker-kill": lambda w: broker_outage(w, 10.0, kill=True),
    "unplug": lambda w: unplug_replug(w, 50),
    "kill": lambda w: kill_service(w, 100),
    "disk-full": lambda w: disk_full(w, 20.0),
    "command-flood": lambda w: _command_flood(w, 60.0),
}


def report(results: Sequence[DrillResult]) -> None:
    print_table(
        ["drill", "reps", "measurements", "lost", "undetected dup", "re-deliveries",
         "integrity fail", "detect s (med/max)", "recover s (med/max)", "pass"],
        [[r.name, r.repetitions, r.measurements, r.lost, r.undetected_duplicates,
          r.redeliveries, r.integrity_failures, span_text(r.detect_s), span_text(r.recover_s),
          "yes" if r.ok else "NO"] for r in results],
    )
    for r in results:
        for note in r.notes:
            print(f"- {r.name}: {note}")


async def main_async(args: argparse.Namespace) -> int:
    print_machine()
    drills = LONG if args.long else SHORT
    names = [args.only] if args.only else list(drills)
    results: list[DrillResult] = []
    fuzz_n = 100_000 if args.long else 5_000
    with tempfile.TemporaryDirectory(prefix="heft-drills-", dir="/var/tmp") as tmp:
        for name in names:
            if name == "fuzz":
                continue
            print(f"drill {name} ...", flush=True)
            t = time.monotonic()
            results.append(await drills[name](Path(tmp) / name))
            print(f"  done in {time.monotonic() - t:.0f} s", flush=True)
    if not args.only or args.only == "fuzz":
        print(f"drill fuzz ({fuzz_n} frames per driver) ...", flush=True)
        logging.disable(logging.CRITICAL)  # every bad frame is logged; not needed here
        try:
            fr, rows = fuzz(fuzz_n)
        finally:
            logging.disable(logging.NOTSET)
        results.append(fr)
        print_table(["driver", "fuzzed frames", "frame errors counted", "accepted as reading",
                     "of which altered", "canaries lost", "exceptions", "frames/s"], rows)
    print()
    report(results)
    if args.json:
        print(json.dumps([vars(r) for r in results], default=str))
    return 0 if all(r.ok for r in results) else 1


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(prog="python -m tests.bench.drills")
    parser.add_argument("--long", action="store_true", help="the long soaks (~25 min)")
    parser.add_argument("--only", choices=sorted(set(SHORT) | set(LONG) | {"fuzz"}))
    parser.add_argument("--json", action="store_true")
    args = parser.parse_args(argv)
    if args.only and args.only not in (LONG if args.long else SHORT) and args.only != "fuzz":
        parser.error(f"--only {args.only}: not a drill of this mode")
    return asyncio.run(main_async(args))


if __name__ == "__main__":
    sys.exit(main())

