"""``heft demo``: a simulated bench, the service and the dashboard in one command.

Larkspur Clubworks (an invented maker) is building a set of irons, 4-iron to pitching wedge, to
D2 +/- 0.5. A simulated two-support load-cell beam is served on a pseudo-terminal; the club of
the set is laid on it hands-free every few seconds, now and then one is built out of spec and
now and then somebody bumps the bench. The real service reads the pty through pyserial, stores
into a temporary SQLite database and (with ``--broker``) publishes over MQTT; the dashboard is
one more subscriber of its events. No hardware, no broker needed.

The service runs on its own thread and event loop, so the dashboard's redraws never delay
capture, and an exception in the dashboard never stops it. ``q`` stops everything and removes
the temporary files.
"""

from __future__ import annotations

import argparse
import asyncio
import contextlib
import logging
import random
import sys
import tempfile
import threading
import time
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from daemon.command_api import Command, Reply, SelectSpec, SetClubId
from daemon.config import StationConfig, parse_config
from daemon.events import EventBus
from daemon.mqtt_settings import MqttSettings
from daemon.physics.swingweight import moment_g_in_from_points, points_from_label
from daemon.service import Service
from drivers.sim.definitions import BeamDef, builtin_definition
from drivers.sim.devices import make_device
from drivers.sim.physics import BenchTimeline, Club, Placement, make_geometry
from drivers.sim.pty_server import PtyDevice

log = logging.getLogger("heft.demo")

STATION = "bench-1"
JOB = "LK-2417"
SPEC = "lk-irons-d2"
TARGET = "D2"
TOLERANCE_POINTS = 0.5
# The set: club -> nominal total weight in grams (invented; steel-shafted irons, ~6.5 g a step).
LARKSPUR_IRONS: dict[str, float] = {
    "4i": 410.0, "5i": 416.5, "6i": 423.0, "7i": 429.5, "8i": 436.0, "9i": 442.5, "PW": 449.0,
}
WEIGHT_TOLERANCE_G = 3.0
ON_S = 4.0  # a club rests this long on the supports
GAP_S = 2.5  # then the bench is empty this long
OUT_OF_SPEC_EVERY = 6  # every 6th club is built heavy in the head
BUMP_EVERY = 5  # every 5th placement somebody knocks the bench
SELECT_LEAD_S = 1.0  # the operator picks the next club this long before laying it down
READY_TIMEOUT_S = 20.0


@dataclass(frozen=True, slots=True)
class DemoClub:
    """One placement of the scenario: which club of the set, its id, and the physical club."""

    club: str
    club_id: str
    placement: Placement


def scenario(count: int, seed: int, start_s: float = 2.0) -> list[DemoClub]:
    """``count`` placements cycling through the set, with out-of-spec clubs and bumps."""
    rng = random.Random(seed)
    target_points = points_from_label(TARGET)
    names = list(LARKSPUR_IRONS)
    out: list[DemoClub] = []
    t = start_s
    for k in range(count):
        name = names[k % len(names)]
        weight_g = LARKSPUR_IRONS[name] + rng.uniform(-1.5, 1.5)
        points = target_points + rng.gauss(0.0, 0.15)
        if (k + 1) % OUT_OF_SPEC_EVERY == 0:
            points += rng.choice((-1.0, 1.0)) * rng.uniform(0.8, 1.4)
        balance_point_in = 14.0 + moment_g_in_from_points(points) / weight_g
        club_id = f"LK2417-{name}-{k // len(names) + 1:02d}"
        bumps: tuple[tuple[float, float], ...] = ()
        if (k + 1) % BUMP_EVERY == 0:
            bumps = ((t + rng.uniform(0.2, 0.6), 0.08 * weight_g),)
        placement = Placement(Club(weight_g, balance_point_in, club_id), t, t + ON_S, bumps)
        out.append(DemoClub(name, club_id, placement))
        t += ON_S + GAP_S
    return out


def beam_definition() -> BeamDef:
    d = builtin_definition("beam")
    assert isinstance(d, BeamDef)
    return d


def station_config(port: str, db: Path, mqtt: MqttSettings | None) -> StationConfig:
    """The demo station: the simulated beam at 4 in and 36 in, calibrated from its definition."""
    d = beam_definition()
    channels = {
        f"beam/{ch.bench_channel}": {
            "source": "config",
            "zero_counts": ch.offset_counts,
            "counts_per_g": ch.counts_per_g,
        }
        for ch in d.channels
    }
    data: dict[str, Any] = {
        "station": STATION,
        "job": JOB,
        "storage": {"path": str(db)},
        "devices": [{"name": "beam", "driver": "beam", "port": port, "baudrate": 115200}],
        "geometry": {
            "type": "two_support",
            "channel_a": "beam/0",
            "position_a_in": 4.0,
            "channel_b": "beam/1",
            "position_b_in": 36.0,
        },
        "channels": channels,
        "capture": {"preset_name": "hx711_80hz", "capacity_g": 5000},
        "specs": {
            SPEC: {
                "swingweight": TARGET,
                "tolerance_points": TOLERANCE_POINTS,
                "clubs": {
                    name: {"total_weight": {"min_g": w - WEIGHT_TOLERANCE_G,
                                            "max_g": w + WEIGHT_TOLERANCE_G}}
                    for name, w in LARKSPUR_IRONS.items()
                },
            }
        },
        "jobs": {
            JOB: {"spec": SPEC, "description": "Larkspur irons 4-PW, D2"},
            "LK-2418": {"spec": SPEC, "description": "Larkspur irons, second set"},
        },
        "mqtt": (mqtt or MqttSettings(enabled=False)).model_dump(mode="json"),
    }
    if mqtt is not None and mqtt.password is not None:
        data["mqtt"]["password"] = mqtt.password.get_secret_value()
    return parse_config(data)


class ServiceThread:
    """The service on its own thread and event loop, plus the demo's operator.

    The operator picks each club of the set (select_spec with the club, set_club_id) shortly
    before it is laid on the bench, as a person at the bench would.
    """

    def __init__(self, config: StationConfig, plan: list[DemoClub], bench: PtyDevice) -> None:
        self.config = config
        self.plan = plan
        self.bench = bench
        self.bus = EventBus()
        self.service = Service(config, self.bus)
        self.loop: asyncio.AbstractEventLoop | None = None
        self.error: BaseException | None = None
        self._main: asyncio.Task[None] | None = None
        self._ready = threading.Event()
        self._thread = threading.Thread(target=self._thread_main, name="heft-service", daemon=True)

    def start(self) -> None:
        self._thread.start()
        if not self._ready.wait(READY_TIMEOUT_S) or self.error is not None:
            self.stop()
            raise RuntimeError(f"the service did not start: {self.error or 'timed out'}")

    def _thread_main(self) -> None:
        try:
            asyncio.run(self._amain())
        except BaseException as err:  # reported by start()/stop(), never lost
            self.error = err
            self._ready.set()

    async def _amain(self) -> None:
        self.loop = asyncio.get_running_loop()
        self._main = asyncio.current_task()
        run = asyncio.create_task(self.service.run(), name="service")
        ready = asyncio.create_task(self.service.ready.wait())
        await asyncio.wait({run, ready}, return_when=asyncio.FIRST_COMPLETED)
        if run.done():
            run.result()  # raises why the service stopped
        self._ready.set()
        operator = asyncio.create_task(self._operator(), name="operator")
        operator.add_done_callback(_log_failure)
        try:
            await run
        except asyncio.CancelledError:
            pass
        finally:
            operator.cancel()
            run.cancel()
            with contextlib.suppress(asyncio.CancelledError):
                await run

    async def _operator(self) -> None:
        for item in self.plan:
            wait_s = item.placement.t_on_s - SELECT_LEAD_S - self.bench.bench_time_s()
            if wait_s > 0:
                await asyncio.sleep(wait_s)
            for cmd in (SelectSpec(command="select_spec", spec=SPEC, club=item.club),
                        SetClubId(command="set_club_id", club_id=item.club_id)):
                reply = await self.service.handle_command(cmd)
                if not reply.ok:
                    log.warning("demo operator: %s refused: %s", cmd.command, reply.message)

    async def handle_command(self, cmd: Command) -> Reply:
        return await self.service.handle_command(cmd)

    def stop(self) -> None:
        loop, main = self.loop, self._main
        if loop is not None and main is not None and not loop.is_closed():
            with contextlib.suppress(RuntimeError):  # the loop may have just finished
                loop.call_soon_threadsafe(main.cancel)
        if self._thread.is_alive():
            self._thread.join(timeout=15)


def _log_failure(task: asyncio.Task[None]) -> None:
    if not task.cancelled() and task.exception() is not None:
        log.error("demo operator stopped: %r", task.exception())


@contextlib.contextmanager
def demo_bench(
    *, mqtt: MqttSettings | None = None, seed: int = 2417, clubs: int = 2000
) -> Iterator[ServiceThread]:
    """Simulated beam on a pty + the service on its thread, in a temporary folder.

    Everything is stopped and the folder removed on exit, whatever happened inside.
    """
    with tempfile.TemporaryDirectory(prefix="heft-demo-") as workdir:
        plan = scenario(clubs, seed)
        timeline = BenchTimeline(make_geometry("two_support"), [c.placement for c in plan])
        device = make_device(beam_definition(), timeline, seed=seed)
        with PtyDevice(device, link=Path(workdir) / "beam") as bench:
            config = station_config(str(bench.path), Path(workdir) / "heft.db", mqtt)
            runner = ServiceThread(config, plan, bench)
            runner.start()
            try:
                yield runner
            finally:
                runner.stop()


def register(subparsers: Any) -> None:
    p: argparse.ArgumentParser = subparsers.add_parser(
        "demo",
        help="a simulated bench with the dashboard: no hardware, no broker needed",
        description=(
            "Run a simulated bench (Larkspur Clubworks building a set of irons), the heft "
            "service with a temporary database, and the dashboard. Clubs are laid on the "
            "simulated beam hands-free; watch captures, verdicts and alarms. q quits."
        ),
    )
    p.add_argument("--broker", metavar="URL", help="also publish to this MQTT broker")
    p.add_argument("--seed", type=int, default=2417, help="scenario seed (default 2417)")
    p.add_argument("--bell", action="store_true", help="ring the terminal bell on FAIL and alarms")
    p.add_argument(
        "--headless-seconds",
        type=float,
        metavar="N",
        help="run without a terminal for N seconds, print what was captured, then quit",
    )
    p.set_defaults(func=run, _parser=p)


def run(args: argparse.Namespace) -> int:
    from tui.app import HeftDashboard
    from tui.mqtt_source import BrokerUrlError, settings_from_url
    from tui.source import InProcessSource

    parser: argparse.ArgumentParser = args._parser
    mqtt = None
    if args.broker is not None:
        try:
            mqtt = settings_from_url(args.broker)
        except BrokerUrlError as err:
            parser.error(f"--broker: {err}")
    if args.headless_seconds is not None and not args.headless_seconds > 0:
        parser.error("--headless-seconds: expected a number of seconds > 0")
    started = time.monotonic()
    with demo_bench(mqtt=mqtt, seed=args.seed) as runner:
        assert runner.loop is not None
        source = InProcessSource(
            runner.bus,
            runner.handle_command,
            runner.service.store,
            service_loop=runner.loop,
            jobs=list(runner.config.jobs),
        )
        app = HeftDashboard(source, station=STATION, bell=args.bell)
        if args.headless_seconds is None:
            app.run()
        else:
            app.call_later(lambda: app.set_timer(args.headless_seconds, app.exit))
            app.run(headless=True, size=(120, 40))
        workdir = Path(runner.config.storage.path).parent
        if runner.error is not None:
            print(f"heft demo: the service stopped: {runner.error}", file=sys.stderr)
            return 1
    shown = list(app.state.measurements)
    verdicts = [m.verdict.value for m in shown]
    print(
        f"heft demo: {len(shown)} clubs captured in {time.monotonic() - started:.0f} s "
        f"({verdicts.count('fail')} fail, {verdicts.count('near_limit')} near limit); "
        f"ui errors {app.ui_errors}; temporary files "
        f"{'left in' if workdir.exists() else 'removed:'} {workdir}"
    )
    for m in shown[-10:]:
        print(f"  #{m.seq} {m.club or '-'} {m.club_id or '-'} {m.swingweight} "
              f"{m.total_weight_g:.1f} g {m.verdict.value}")
    return 0
