"""Fleet benchmark: 100 stations publishing to one Mosquitto; is every measurement delivered?

Run: ``.venv/bin/python -m tests.bench.fleet_bench`` (``--stations N``, ``--hosts H``,
``--placements K``; about three minutes on a 2-core machine with the defaults).

100 ``heft run`` processes would not fit two cores (each Python start-up alone costs a second
of CPU), so ``--hosts`` processes (``tests.bench.fleet_host``) each run a share of the stations:
one ``daemon.service.Service`` per station with its own simulated 10 samples/s beam on a pty,
its own SQLite file and its own MQTT client id (``heft-qc-<n>``), all in one event loop. Each
station measures a club every 6 s.

A subscriber at QoS 1 on ``<root>/+/measurement`` counts what arrives. After the last club,
the bench waits until every station's outbox is empty (every row acknowledged by the broker),
stops the hosts and compares the ids stored in the 100 databases with the ids received.
Also reported: CPU share of the broker, of the hosts (together) and of the subscriber, over the
window in which clubs are measured, and the broker's peak RSS.
"""

from __future__ import annotations

import argparse
import asyncio
import contextlib
import json
import os
import sqlite3
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

from tests.bench.fleet_host import station_name
from tests.bench.rig import (
    REPO,
    CpuMeter,
    Listener,
    print_machine,
    print_table,
    proc_status_mb,
    start_broker,
    unique_root,
    wait_for,
)
from tests.processes import stop_processes

PERIOD_S = 6.0
ON_S = 4.0
START_S = 8.0


def _db_counts(db: Path) -> tuple[set[str], int]:
    """(stored ids, outbox rows not yet acknowledged) of one station database."""
    if not db.exists():
        return set(), 0
    with contextlib.closing(sqlite3.connect(f"file:{db}?mode=ro", uri=True, timeout=5)) as con:
        ids = {r[0] for r in con.execute("SELECT id FROM measurements")}
        pending = con.execute("SELECT COUNT(*) FROM outbox WHERE sent_utc IS NULL").fetchone()[0]
    return ids, int(pending)


def _all_counts(work: Path, stations: int) -> tuple[set[str], int]:
    ids: set[str] = set()
    pending = 0
    for i in range(stations):
        got, p = _db_counts(work / f"{station_name(i)}.db")
        ids |= got
        pending += p
    return ids, pending


async def run(args: argparse.Namespace) -> int:
    print_machine()
    with tempfile.TemporaryDirectory(prefix="heft-fleet-", dir="/var/tmp") as tmp:
        work = Path(tmp)
        broker = start_broker(work / "broker")
        assert broker.process is not None
        root = unique_root("fleet")
        listener = Listener(broker, [f"{root}/+/measurement", f"{root}/+/status"])
        hosts: list[subprocess.Popen[bytes]] = []
        per_host = -(-args.stations // args.hosts)
        try:
            async with listener.running():
                me = CpuMeter(os.getpid())
                for h in range(args.hosts):
                    first = h * per_host
                    count = min(per_host, args.stations - first)
                    if count <= 0:
                        break
                    hosts.append(subprocess.Popen(  # noqa: ASYNC220 (launch, not timed)
                        [sys.executable, "-m", "tests.bench.fleet_host", "--work", str(work),
                         "--port", str(broker.port), "--root", root, "--first", str(first),
                         "--count", str(count), "--period", str(PERIOD_S), "--on", str(ON_S),
                         "--start", str(START_S), "--placements", str(args.placements)],
                        cwd=REPO, stdout=subprocess.PIPE,
                        stderr=(work / f"host-{h}.log").open("wb"),
                    ))
                t_launch = time.monotonic()

                def online() -> int:
                    latest: dict[str, bytes] = {}
                    for m in listener.on("/status"):
                        latest[m.topic] = m.payload
                    return sum(1 for p in latest.values() if p == b"online")

                await wait_for(lambda: online() >= args.stations, 120, "every station online")
                t_online = time.monotonic() - t_launch
                cpus = [CpuMeter(broker.process.pid)] + [CpuMeter(p.pid) for p in hosts]
                for c in [*cpus, me]:
                    c.start()
                # The clubs: the last one is lifted at about START + (K - 1) * PERIOD + 2 * ON.
                busy_s = START_S + args.placements * PERIOD_S + ON_S - t_online
                await asyncio.sleep(max(5.0, busy_s))
                shares = [c.share() for c in cpus]
                my_share = me.share()
                broker_rss = proc_status_mb(broker.process.pid, "VmHWM")
                t_drain = time.monotonic()
                await wait_for(lambda: _all_counts(work, args.stations)[1] == 0, 120,
                               "every outbox acknowledged", poll_s=1.0)
                drain_s = time.monotonic() - t_drain
                stored, _ = _all_counts(work, args.stations)
                await wait_for(lambda: {m.json()["id"] for m in listener.on("/measurement")}
                               >= stored, 30, "the last deliveries", poll_s=0.5)
        finally:
            stop_processes(hosts, timeout_s=30)
            broker.stop()
        received = [m.json() for m in listener.on("/measurement")]
        ids = [m["id"] for m in received]
        distinct = set(ids)
        per_station: dict[str, int] = {}
        for m in received:
            per_station[m["station"]] = per_station.get(m["station"], 0) + 1
        counts = [per_station.get(station_name(i), 0) for i in range(args.stations)]
        stored_final, _ = _all_counts(work, args.stations)
    lost = len(stored_final - distinct)
    print(f"\nFleet: {args.stations} stations in {len(hosts)} host processes, one Mosquitto, "
          f"a club every {PERIOD_S:g} s per station, {args.placements} clubs each")
    print_table(
        ["what", "value"],
        [
            ["stations online after launch (s)", f"{t_online:.1f}"],
            ["measurements stored (all databases)", len(stored_final)],
            ["measurements received at QoS 1 (distinct ids)", len(distinct)],
            ["received twice or more (same id)", len(ids) - len(distinct)],
            ["lost (stored, never received)", lost],
            ["received but not stored", len(distinct - stored_final)],
            ["clubs placed (all stations)", args.stations * args.placements],
            ["measurements per station min / median / max",
             f"{min(counts)} / {statistics.median(counts):g} / {max(counts)}"],
            ["outbox drained after the last club (s)", f"{drain_s:.1f}"],
            ["broker CPU (share of one core)", f"{shares[0]:.3f}"],
            ["hosts CPU, all stations (share of one core)", f"{sum(shares[1:]):.3f}"],
            ["per station CPU (share of one core)", f"{sum(shares[1:]) / args.stations:.4f}"],
            ["subscriber CPU (share of one core)", f"{my_share:.3f}"],
            ["broker peak RSS (MB)", f"{broker_rss:.1f}"],
        ],
    )
    print(f"target: none lost -> {'met' if lost == 0 else 'MISSED'}")
    if args.json:
        print(json.dumps({"stations": args.stations, "stored": len(stored_final),
                          "received": len(distinct), "lost": lost,
                          "broker_cpu": shares[0], "hosts_cpu": sum(shares[1:])}))
    return 0 if lost == 0 else 1


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(prog="python -m tests.bench.fleet_bench")
    parser.add_argument("--stations", type=int, default=100)
    parser.add_argument("--hosts", type=int, default=4)
    parser.add_argument("--placements", type=int, default=12, help="clubs per station")
    parser.add_argument("--json", action="store_true")
    args = parser.parse_args(argv)
    if args.stations < 1 or args.hosts < 1 or args.placements < 1:
        parser.error("--stations, --hosts and --placements must be at least 1")
    return asyncio.run(run(args))


if __name__ == "__main__":
    sys.exit(main())
