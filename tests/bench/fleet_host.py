"""One process hosting several stations for the fleet benchmark (``tests.bench.fleet_bench``).

``python -m tests.bench.fleet_host --work DIR --port P --root R --first I --count N ...`` serves
N simulated beams (10 samples/s) on ptys and runs one ``daemon.service.Service`` per station
(``qc-<i>``, each with its own SQLite file and MQTT client ``heft-qc-<i>``) in one event loop,
until SIGTERM. Each station gets a club every ``--period`` seconds, ``--placements`` times.
"""

from __future__ import annotations

import argparse
import asyncio
import contextlib
import logging
import signal
import sys
import tomllib
from pathlib import Path

from heft.daemon.config import parse_config
from heft.daemon.service import Service
from tests.bench.rig import beam_definition, demo_plan, serve_beam, station_toml


def station_name(i: int) -> str:
    return f"qc-{i:03d}"


async def main_async(args: argparse.Namespace) -> int:
    work = Path(args.work)
    definition = beam_definition("beam", rate_hz=10)
    ptys = []
    services = []
    for i in range(args.first, args.first + args.count):
        name = station_name(i)
        link = work / f"{name}.tty"
        # Stations start their clubs spread over one period, as a real line would.
        offset = (i % 25) * args.period / 25
        plan = demo_plan(count=args.placements, period_s=args.period, on_s=args.on,
                         start_s=args.start + offset)
        ptys.append(serve_beam(definition, plan, link, seed=100 + i))
        text = station_toml(
            station=name, db=work / f"{name}.db", devices=[("beam", str(link))],
            mqtt_port=args.port, topic_root=args.root, calibration=definition,
            preset="hx711_10hz", keepalive_s=30,
        )
        services.append(Service(parse_config(tomllib.loads(text))))
    tasks = [asyncio.create_task(s.run(), name=f"station-{i}") for i, s in enumerate(services)]
    stop = asyncio.Event()
    loop = asyncio.get_running_loop()
    for sig in (signal.SIGTERM, signal.SIGINT):
        loop.add_signal_handler(sig, stop.set)
    await asyncio.wait_for(asyncio.gather(*(s.ready.wait() for s in services)), 60)
    print("READY", flush=True)
    await stop.wait()
    for t in tasks:
        t.cancel()
    for t in tasks:
        with contextlib.suppress(asyncio.CancelledError):
            await t
    for p in ptys:
        await asyncio.to_thread(p.close)
    return 0


def main() -> int:
    parser = argparse.ArgumentParser(prog="python -m tests.bench.fleet_host")
    parser.add_argument("--work", required=True)
    parser.add_argument("--port", type=int, required=True)
    parser.add_argument("--root", required=True)
    parser.add_argument("--first", type=int, required=True)
    parser.add_argument("--count", type=int, required=True)
    parser.add_argument("--period", type=float, default=6.0)
    parser.add_argument("--on", type=float, default=4.0)
    parser.add_argument("--start", type=float, default=8.0)
    parser.add_argument("--placements", type=int, default=10)
    args = parser.parse_args()
    logging.basicConfig(level=logging.WARNING, stream=sys.stderr,
                        format="%(asctime)s %(levelname)s %(name)s: %(message)s")
    return asyncio.run(main_async(args))


if __name__ == "__main__":
    sys.exit(main())
