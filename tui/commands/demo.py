"""``heft demo``: a simulated bench, the service and the dashboard in one command.

Larkspur Clubworks (an invented maker, ``drivers/sim/scenario.py``) is building sets of irons,
4-iron to pitching wedge, to D2. A simulated two-support load-cell beam and a barcode scanner
are served on pseudo-terminals; the clubs of the set are laid on the beam hands-free every few
seconds, now and then one is out of spec and now and then somebody bumps the bench. The real
service reads the ptys through pyserial, stores into a temporary SQLite database and (with
``--broker``) publishes over MQTT; the dashboard is one more subscriber of its events. No
hardware, no broker needed.

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
import signal
import sys
import tempfile
import threading
import time
from collections.abc import Iterator
from dataclasses import dataclass
from datetime import UTC, date, datetime, timedelta
from pathlib import Path
from typing import TYPE_CHECKING, Any

from heft.daemon.command_api import Command, Reply, SelectJob, SelectSpec
from heft.daemon.config import StationConfig, parse_config
from heft.daemon.events import EventBus
from heft.daemon.mqtt_settings import MqttSettings
from heft.daemon.physics.swingweight import label_from_points, moment_g_in_from_points
from heft.daemon.records import CalibrationRecord, ReferenceMass
from heft.daemon.service import Service
from heft.daemon.storage import Store
from heft.drivers.sim.devices import BeamDevice, ScannerDevice
from heft.drivers.sim.physics import BenchTimeline, Club, Placement
from heft.drivers.sim.pty_server import PtyDevice
from heft.drivers.sim.scenario import MAKER, larkspur_irons, scenario_timeline
from heft.tui.source import INBOX_SIZE

if TYPE_CHECKING:
    from textual.app import App

log = logging.getLogger("heft.demo")

SPEC = "larkspur-irons"
WEIGHT_TOLERANCE_G = 3.0  # each club's total weight within this of the first set's (invented)
OUT_OF_SPEC_EVERY = 9  # in the sets after the first, every 9th club is built off target
BUMP_EVERY = 6  # ... and every 6th placement somebody knocks the bench
SELECT_LEAD_S = 1.2  # the operator picks the next club of the set this long before laying it
READY_TIMEOUT_S = 20.0
RESUME_GAP_S = 2.0  # after a calibration, the next club is laid this long after the selection
PAUSE_POLL_S = 0.2
PAUSED_NOTE = "demo: placements paused while you calibrate"

SCENARIO = larkspur_irons()
STATION = SCENARIO.station
JOB = SCENARIO.job


@dataclass(frozen=True, slots=True)
class DemoClub:
    """One placement: which club of the set (its label in the spec) and the physical club."""

    club: str
    placement: Placement


def demo_plan(count: int, seed: int) -> list[DemoClub]:
    """``count`` placements: the scenario's own first set, then more sets of the same irons.

    The first set is exactly the simulator's Larkspur scenario (two clubs out of spec, one
    bump). Later sets are rebuilt near the target with a little spread, and now and then one
    club off target or a bump, so the demo keeps going as long as it is watched.
    """
    sc = SCENARIO
    first = scenario_timeline(sc, seed).placements
    plan = [DemoClub(label, p) for (label, _), p in zip(sc.clubs, first, strict=True)]
    rng = random.Random(f"demo:{seed}")
    t = first[-1].t_off_s + rng.uniform(*sc.gap_s)
    set_no = 1
    while len(plan) < count:
        set_no += 1
        for label, club in sc.clubs:
            if len(plan) >= count:
                break
            k = len(plan) + 1
            points = sc.target_points + rng.gauss(0.0, sc.tolerance_points / 4)
            if k % OUT_OF_SPEC_EVERY == 0:
                points += rng.choice((-1.0, 1.0)) * (sc.tolerance_points + rng.uniform(0.3, 1.0))
            weight_g = club.total_weight_g + rng.uniform(-1.5, 1.5)
            balance_point_in = 14.0 + moment_g_in_from_points(points) / weight_g
            club_id = f"{club.club_id}-{set_no:02d}"
            hold_s = rng.uniform(*sc.hold_s)
            bumps: tuple[tuple[float, float], ...] = ()
            if k % BUMP_EVERY == 0:
                bumps = ((t + rng.uniform(0.4, 0.7) * hold_s, sc.bump_g),)
            placement = Placement(Club(weight_g, balance_point_in, club_id), t, t + hold_s, bumps)
            plan.append(DemoClub(label, placement))
            t += hold_s + rng.uniform(*sc.gap_s)
    return plan


def station_config(
    beam_port: str, scanner_port: str, db: Path, mqtt: MqttSettings | None
) -> StationConfig:
    """The demo station: the simulated beam (supports as in the scenario) and the scanner."""
    sc = SCENARIO
    # Calibrations come from the database (seeded by seed_calibrations), so the dashboard's
    # calibration flow works on the demo bench too.
    channels = {f"beam/{ch.bench_channel}": {"source": "database"} for ch in sc.beam.channels}
    data: dict[str, Any] = {
        "station": STATION,
        "job": JOB,
        "storage": {"path": str(db)},
        "devices": [
            {"name": "beam", "driver": "beam", "port": beam_port, "baudrate": 115200},
            {"name": "scanner", "driver": "scanner", "port": scanner_port},
        ],
        "geometry": {
            "type": "two_support",
            "channel_a": "beam/0",
            "position_a_in": sc.geometry.support_a_in,
            "channel_b": "beam/1",
            "position_b_in": sc.geometry.support_b_in,
        },
        "channels": channels,
        "capture": {"preset_name": "hx711_80hz", "capacity_g": sc.beam.capacity_g},
        "specs": {
            SPEC: {
                "swingweight": label_from_points(sc.target_points),
                "tolerance_points": sc.tolerance_points,
                "clubs": {
                    label: {"total_weight": {"min_g": club.total_weight_g - WEIGHT_TOLERANCE_G,
                                             "max_g": club.total_weight_g + WEIGHT_TOLERANCE_G}}
                    for label, club in sc.clubs
                },
            }
        },
        "jobs": {
            JOB: {"spec": SPEC, "description": f"{MAKER}: irons 4-PW"},
            "LCW-2612 irons 4-PW": {"spec": SPEC, "description": f"{MAKER}: the next set"},
        },
        "mqtt": (mqtt or MqttSettings(enabled=False)).model_dump(mode="json"),
    }
    if mqtt is not None and mqtt.password is not None:
        data["mqtt"]["password"] = mqtt.password.get_secret_value()
    return parse_config(data)


def seed_calibrations(db: Path, today: date) -> None:
    """Span records as if the beam was calibrated 85 days ago; beam/1 falls due in 5 days.

    A store kept from an earlier run (``--db``) keeps its own records: none is added twice.
    """
    beam = SCENARIO.beam
    store = Store(db)
    try:
        for ch, due_in_days in zip(beam.channels, (45, 5), strict=False):
            channel = f"beam/{ch.bench_channel}"
            if store.latest_calibration(channel) is not None:
                continue
            store.add_calibration(
                CalibrationRecord(
                    id=f"demo-{ch.bench_channel}-span",
                    station=STATION,
                    channel=channel,
                    kind="span",
                    time_utc=datetime.combine(today - timedelta(days=85), datetime.min.time(),
                                              tzinfo=UTC),
                    zero_counts=ch.offset_counts,
                    counts_per_g=ch.counts_per_g,
                    reference=ReferenceMass(mass_g=1000.0, weight_class="M1",
                                            weight_id="LCW-REF-1000"),
                    result_g=1000.0,
                    residual_g=0.0,
                    next_due=today + timedelta(days=due_in_days),
                    device_model=beam.model,
                    device_firmware=beam.firmware,
                    device_serial=beam.serial_number,
                    note="seeded by heft demo",
                )
            )
    finally:
        store.close()


class ServiceThread:
    """The service on its own thread and event loop, plus the demo's operator.

    The operator picks each club of the set (select_spec with the club) shortly before it is
    laid on the bench, as a person at the bench would, then lays it down (the club goes onto the
    simulated bench's timeline and the scanner reads its id). While the dashboard's calibration
    screen is open the operator lays nothing (:meth:`pause_placements`), so the beam stays empty
    for the zero; after it closes, the set carries on where it stopped.
    """

    def __init__(
        self,
        config: StationConfig,
        plan: list[DemoClub],
        bench: PtyDevice,
        timeline: BenchTimeline | None = None,
        scanner: ScannerDevice | None = None,
    ) -> None:
        self.config = config
        self.plan = plan
        self.bench = bench
        self.timeline = timeline
        self.scanner = scanner
        self.paused = False
        self._resumed = asyncio.Event()  # set while the operator may lay clubs (service loop)
        self._resumed.set()
        self._club: str | None = None  # the operator's current club selection
        self.bus = EventBus()
        self.service = Service(config, self.bus)
        # Taken before the service starts, so the dashboard sees its very first events.
        self.dashboard_subscription = self.bus.subscribe(maxsize=INBOX_SIZE)
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
        delay_s = 0.0  # how far the plan has been pushed back by calibration pauses
        resumed = self._resumed
        for item in self.plan:
            while True:
                if not resumed.is_set():
                    await resumed.wait()
                    resume_at_s = self.bench.bench_time_s() + SELECT_LEAD_S + RESUME_GAP_S
                    delay_s = max(delay_s, resume_at_s - item.placement.t_on_s)
                wait_s = item.placement.t_on_s + delay_s - SELECT_LEAD_S - self.bench.bench_time_s()
                if wait_s <= 0:
                    break
                await asyncio.sleep(min(wait_s, PAUSE_POLL_S))
            self._club = item.club
            await self._select(SelectSpec(command="select_spec", spec=SPEC, club=item.club))
            self._lay(item.placement, delay_s)

    def _lay(self, p: Placement, delay_s: float) -> None:
        """Put the club on the simulated bench (later by ``delay_s``); the scanner reads its id."""
        if self.timeline is None:  # a bench built with the whole plan on it already
            return
        bumps = tuple((t_s + delay_s, amplitude_g) for t_s, amplitude_g in p.bumps)
        placed = self.timeline.place(p.club, p.t_on_s + delay_s, p.t_off_s + delay_s, bumps)
        if self.scanner is not None and p.club.club_id:
            lead_s = SCENARIO.scanner.scan_lead_s
            self.scanner.scans.append((max(0.0, placed.t_on_s - lead_s), p.club.club_id))

    async def _select(self, cmd: SelectSpec) -> None:
        reply = await self.service.handle_command(cmd)
        if not reply.ok:
            log.warning("demo operator: %s refused: %s", cmd.command, reply.message)

    def pause_placements(self, paused: bool) -> str:
        """Stop (True) or resume (False) laying clubs; returns the note the dashboard shows.

        Called from the dashboard's thread; the operator's event lives on the service's loop.
        """
        self.paused = paused
        event = self._resumed
        if self.loop is not None and not self.loop.is_closed():
            with contextlib.suppress(RuntimeError):  # the loop may have just finished
                self.loop.call_soon_threadsafe(event.clear if paused else event.set)
        return PAUSED_NOTE if paused else ""

    async def handle_command(self, cmd: Command) -> Reply:
        reply = await self.service.handle_command(cmd)
        if reply.ok and isinstance(cmd, SelectJob):
            # A new job resets the club selection: the operator picks the club on the bench
            # again, so the next capture is judged against its own band.
            spec = self.config.jobs[cmd.job].spec if cmd.job in self.config.jobs else None
            if spec is not None and self._club is not None:
                await self._select(SelectSpec(command="select_spec", spec=spec, club=self._club))
        return reply

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
    *, mqtt: MqttSettings | None = None, seed: int = 2417, clubs: int = 2000, db: Path | None = None
) -> Iterator[ServiceThread]:
    """Simulated beam on a pty + the service on its thread, in a temporary folder.

    Everything is stopped and the folder removed on exit, whatever happened inside; the store
    is kept only when ``db`` names where it goes.
    """
    with tempfile.TemporaryDirectory(prefix="heft-demo-") as workdir:
        plan = demo_plan(clubs, seed)
        # The operator lays each club of the plan as it goes (ServiceThread._lay), so that it
        # can hold back while the operator at the dashboard calibrates.
        timeline = BenchTimeline(SCENARIO.geometry, [], SCENARIO.dynamics)
        folder = Path(workdir)
        beam = BeamDevice(SCENARIO.beam, timeline, seed=seed)
        scanner_device = ScannerDevice(SCENARIO.scanner, timeline, seed=seed)
        with (
            PtyDevice(beam, link=folder / "beam") as bench,
            PtyDevice(scanner_device, link=folder / "scanner") as scanner,
        ):
            db = db or folder / "heft.db"
            seed_calibrations(db, datetime.now(UTC).date())
            config = station_config(bench.path, scanner.path, db, mqtt)
            runner = ServiceThread(config, plan, bench, timeline, scanner_device)
            runner.start()
            try:
                yield runner
            finally:
                runner.stop()


class StopOnSignal:
    """SIGTERM and SIGHUP (the terminal closed) stop the demo the way ``q`` does.

    While the dashboard runs, the signal asks it to exit; before it runs (the bench is starting),
    it raises SystemExit so that the ``with`` blocks stop the devices and remove the folder.
    Once cleaning up, further signals are ignored so that the clean-up itself is not cut short.
    """

    SIGNALS = (signal.SIGTERM, signal.SIGHUP)

    def __init__(self) -> None:
        self.app: App[None] | None = None
        self.stopping = False
        self.received: int | None = None

    def install(self) -> None:
        for sig in self.SIGNALS:
            signal.signal(sig, self)

    def __call__(self, signum: int, frame: object) -> None:
        self.received = signum
        if self.stopping:
            return
        if self.app is not None and self.app.is_running:
            self.app.exit()  # on the app's own thread: signal handlers run on the main thread
            return
        self.stopping = True
        raise SystemExit(128 + signum)


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
    p.add_argument("--db", type=Path, metavar="PATH",
                   help="keep the store at PATH (e.g. for heft report); default: a temporary one")
    p.add_argument(
        "--headless-seconds",
        type=float,
        metavar="N",
        help="run without a terminal for N seconds, print what was captured, then quit",
    )
    p.set_defaults(func=run, _parser=p)


def run(args: argparse.Namespace) -> int:
    from heft.tui.app import HeftDashboard
    from heft.tui.mqtt_source import BrokerUrlError, settings_from_url
    from heft.tui.source import InProcessSource

    parser: argparse.ArgumentParser = args._parser
    mqtt = None
    if args.broker is not None:
        try:
            mqtt = settings_from_url(args.broker)
        except BrokerUrlError as err:
            parser.error(f"--broker: {err}")
    if args.headless_seconds is not None and not args.headless_seconds > 0:
        parser.error("--headless-seconds: expected a number of seconds > 0")
    if args.db is not None and not args.db.parent.is_dir():
        parser.error(f"--db: no folder {args.db.parent} to keep the store in")
    started = time.monotonic()
    stopper = StopOnSignal()
    stopper.install()
    db = args.db.resolve() if args.db is not None else None
    with demo_bench(mqtt=mqtt, seed=args.seed, db=db) as runner:
        assert runner.loop is not None
        source = InProcessSource(
            runner.bus,
            runner.handle_command,
            runner.service.store,
            service_loop=runner.loop,
            jobs=list(runner.config.jobs),
            subscription=runner.dashboard_subscription,
            on_calibrating=runner.pause_placements,
        )
        app = HeftDashboard(source, station=STATION, bell=args.bell)
        stopper.app = app
        try:
            if args.headless_seconds is None:
                app.run()
            else:
                app.call_later(lambda: app.set_timer(args.headless_seconds, app.exit))
                app.run(headless=True, size=(120, 40))
        finally:
            stopper.stopping = True
        assert runner.bench.link is not None  # demo_bench links the beam inside its folder
        workdir = runner.bench.link.parent
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
    if args.db is not None:
        print(f"heft demo: store kept at {args.db} (heft report --db {args.db} -o report.html)")
    for m in shown[-10:]:
        print(f"  #{m.seq} {m.club or '-'} {m.club_id or '-'} {m.swingweight} "
              f"{m.total_weight_g:.1f} g {m.verdict.value}")
    return 0
