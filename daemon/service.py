"""The bench service: supervised devices, the pipeline, durable storage, MQTT, commands.

Tasks inside :meth:`Service.run` (one ``asyncio.TaskGroup``; cancelling ``run`` stops them all
and closes every port):

* one supervisor per device: open with backoff (tenacity), read until the port is lost or
  silent for ``silence_timeout_s`` (2 s by default), then raise the device-offline alarm and try
  again; a reopened port starts with its input flushed, and the pipeline abandons any capture
  in progress on that device so no capture spans a disconnect;
* the storage writer: every measurement is committed (WAL, ``synchronous=FULL``) before it is
  published on the bus, and so before MQTT sees it. A failed commit raises the storage-failed
  alarm and the measurement stays queued, retried with backoff until it is stored;
* the ticker: capture timeouts, device status, calibration due dates, the systemd watchdog;
* the MQTT link (``daemon.mqtt_link``) when ``[mqtt] enabled``.

The service routes what the pipeline hands out (``BenchPipeline`` steps return their outputs):
measurements to the store, then the bus; alarm conditions to the station's one
:class:`~heft.daemon.alarms.AlarmManager`, whose changes go to the alarm log in SQLite and the
bus; everything else to the :class:`~heft.daemon.events.EventBus` (the dashboard, the MQTT link
and tests subscribe). Commands are carried out by :mod:`heft.daemon.station_commands`, and
calibration steps by the calibration part (:mod:`heft.daemon.calibration_workflow`); each sees
the pipeline through a small named Protocol.
"""

from __future__ import annotations

import asyncio
import contextlib
import logging
import time
from collections.abc import Callable, Iterable
from dataclasses import dataclass
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

from tenacity import AsyncRetrying, retry_if_exception_type, wait_exponential

from heft.daemon import command_api as api
from heft.daemon.alarms import AlarmCondition, AlarmManager
from heft.daemon.calibration_workflow import (
    CalibrationWorkflow,
    stored_calibrations,
)
from heft.daemon.command_auth import authority_from_config
from heft.daemon.config import DeviceConfig, StationConfig
from heft.daemon.events import (
    Alarm,
    AlarmChanged,
    AlarmKind,
    DeviceStatus,
    EventBus,
    MeasurementCaptured,
)
from heft.daemon.measurement import Measurement
from heft.daemon.mqtt_link import MqttLink
from heft.daemon.pipeline import BenchPipeline, PipelineOutput, SelectionError
from heft.daemon.sd_notify import notify, watchdog_interval_s
from heft.daemon.station_commands import StationCommands
from heft.daemon.storage import StorageError, Store
from heft.drivers.base import DriverError, TransportError
from heft.drivers.reading import ChannelRef, DeviceInfo, Reading
from heft.drivers.recording import RecordingHeader, RecordingTransport, RecordingWriter
from heft.drivers.registry import create_driver
from heft.drivers.session import DeviceSession
from heft.drivers.transport import Transport, open_transport

log = logging.getLogger("heft.service")

TICK_S = 0.2
DEVICE_STATUS_EVERY_S = 1.0
CALIBRATION_CHECK_EVERY_S = 60.0
RECONNECT_MAX_WAIT_S = 5.0
STORE_RETRY_MAX_WAIT_S = 10.0
MQTT_RETRY_MAX_WAIT_S = 5.0  # a broker back after an outage is found within this long


@dataclass
class DeviceRuntime:
    """What the service knows about one device while it runs."""

    config: DeviceConfig
    session: DeviceSession | None = None
    connected: bool = False
    readings: int = 0  # of channel 0: the sample rate is per channel
    rate_t0: float = 0.0
    rate_n0: int = 0
    sample_rate_hz: float | None = None
    last_value: float | None = None
    last_t_mono_s: float | None = None
    failed_opens: int = 0  # since the device was last connected: drives the reopen backoff
    down_logged: bool = False  # this outage has been logged (once, not once per retry)


class Service:
    """One station.

    Construction is cheap (no I/O): the store opens and the devices start in :meth:`run`.

    Args:
        config: Validated station config (``daemon.config.load_config``).
        bus: Where events go; a new one when None (read it back as ``service.bus``).
        store: An open Store to use (and not close); None opens ``config.storage.path``.
        clock: Monotonic clock (seconds) for timeouts and tick times.
        clock_utc: Wall clock for measurement and alarm stamps.
        record_dir: When set, every device's received bytes are recorded there as
            ``<device>.jsonl`` (the hardware_fixtures format; ``heft replay`` reads it).
    """

    def __init__(
        self,
        config: StationConfig,
        bus: EventBus | None = None,
        store: Store | None = None,
        *,
        clock: Callable[[], float] = time.monotonic,
        clock_utc: Callable[[], datetime] = lambda: datetime.now(UTC),
        record_dir: Path | None = None,
    ) -> None:
        self.config = config
        self.record_dir = record_dir
        self._recorders: dict[str, RecordingTransport] = {}
        self.bus = bus if bus is not None else EventBus()
        self._given_store = store
        self.store: Store | None = store
        self._clock = clock
        self._clock_utc = clock_utc
        self.pipeline: BenchPipeline | None = None
        self.calibration: CalibrationWorkflow | None = None
        self.commands: StationCommands | None = None
        # The station's alarms: conditions from the pipeline, the calibration part and the
        # service itself (devices, storage) all land here, and each change is logged and sent.
        self.alarms = AlarmManager(config.station, clock_utc, self._alarm_changed)
        self.devices = {d.name: DeviceRuntime(d) for d in config.devices}
        self._to_store: asyncio.Queue[Measurement] | None = None
        self.stored_count = 0
        self.mqtt_link: MqttLink | None = None
        self.ready = asyncio.Event()

    # ------------------------------------------------------------------------------ running

    async def run(self) -> None:
        """Run until cancelled. Raises StorageError when the database cannot be opened."""
        store = self.store if self.store is not None else Store(self.config.storage.path)
        self.store = store
        try:
            await self._run(store)
        finally:
            self.ready.clear()
            for recorder in self._recorders.values():
                recorder.writer.close()
            self._recorders.clear()
            if self._given_store is None:
                store.close()
                self.store = None

    async def _run(self, store: Store) -> None:
        self._assemble(
            BenchPipeline(
                self.config,
                self._clock_utc,
                calibrations=stored_calibrations(store, self.config.channels),
                first_seq=store.next_seq(self.config.station),
            ),
            store,
        )
        assert self.calibration is not None
        # Alarms left active by the last run are re-evaluated now: close them in the log.
        for stale in store.active_alarms(self.config.station):
            with contextlib.suppress(StorageError):
                store.record_alarm(
                    stale.model_copy(update={"active": False, "acknowledged": False,
                                            "message": "service restarted; re-evaluated",
                                            "time_utc": self._clock_utc()})
                )
        self.calibration.check_due()
        async with asyncio.TaskGroup() as tasks:
            for runtime in self.devices.values():
                tasks.create_task(self._supervise(runtime), name=f"device-{runtime.config.name}")
            tasks.create_task(self._store_writer(), name="store-writer")
            tasks.create_task(self._ticker(), name="ticker")
            if self.config.mqtt.enabled:
                tasks.create_task(self._mqtt(), name="mqtt")
            self.ready.set()
            notify("READY=1")
            log.info("station %s running: %d device(s)", self.config.station, len(self.devices))

    def _assemble(self, pipeline: BenchPipeline, store: Store) -> None:
        """Wire the parts that live while the service runs around ``pipeline`` and ``store``."""
        self.pipeline = pipeline
        self._to_store = asyncio.Queue()
        # A run starts with no alarm held in memory (the log's leftovers are closed in _run).
        self.alarms = AlarmManager(self.config.station, self._clock_utc, self._alarm_changed)
        self.calibration = CalibrationWorkflow(
            self.config, pipeline, store, self._apply_alarm, self._clock_utc
        )
        self.commands = StationCommands(
            pipeline, self.calibration, self.alarms, self._route,
            {name: rt.config.driver for name, rt in self.devices.items()}, self._zero_scale,
        )

    async def _mqtt(self) -> None:
        assert self.store is not None
        self.mqtt_link = MqttLink(
            self.config.mqtt,
            self.config.station,
            self.store,
            self.bus,
            self.handle_command if self.config.mqtt.commands_enabled else None,
            authority=authority_from_config(self.config.commands),
            retry_max_s=MQTT_RETRY_MAX_WAIT_S,
        )
        await self.mqtt_link.run()

    # ------------------------------------------------------------------------------ events

    def _route(self, outputs: Iterable[PipelineOutput]) -> None:
        """Send pipeline outputs on, in order; measurements go to the store first (published
        after), alarm conditions to the station's alarms."""
        for out in outputs:
            if isinstance(out, MeasurementCaptured):
                assert self._to_store is not None
                self._to_store.put_nowait(out.measurement)
            elif isinstance(out, AlarmCondition):
                self._apply_alarm(out)
            else:
                self.bus.publish(out)

    def _apply_alarm(self, condition: AlarmCondition) -> None:
        self.alarms.apply(condition)  # a change comes back through _alarm_changed

    def _alarm_changed(self, alarm: Alarm) -> None:
        self._log_alarm(alarm)
        self.bus.publish(AlarmChanged(alarm=alarm))

    def _log_alarm(self, alarm: Alarm) -> None:
        if self.store is None:
            return
        try:
            self.store.record_alarm(alarm)
        except StorageError as err:  # the alarm still goes out on the bus
            log.error("alarm %s not written to the history: %s", alarm.key, err)

    async def _store_writer(self) -> None:
        """Commit each measurement, in order, before publishing it; never drop one."""
        assert self._to_store is not None and self.store is not None
        store = self.store
        while True:
            m = await self._to_store.get()
            async for attempt in AsyncRetrying(
                retry=retry_if_exception_type(StorageError),
                wait=wait_exponential(multiplier=0.2, max=STORE_RETRY_MAX_WAIT_S),
                before_sleep=lambda state: self._storage_failed(state.outcome),
                reraise=True,
            ):
                with attempt:
                    await asyncio.to_thread(store.add_measurement, m)
            self.stored_count += 1
            log.info(
                "club #%d %s: %.1f g, BP %.2f in, %s (%.2f points), %s",
                m.seq, m.club_id or "-", m.total_weight_g, m.balance_point_in, m.swingweight,
                m.swingweight_points, m.verdict.value,
            )
            self._alarm_set(AlarmKind.STORAGE_FAILED, "storage", False, "storage recovered")
            self.bus.publish(MeasurementCaptured(measurement=m))

    def _storage_failed(self, outcome: Any) -> None:
        err = outcome.exception() if outcome is not None else None
        pending = self._to_store.qsize() + 1 if self._to_store is not None else 1
        log.error("storing a measurement failed (%d waiting, will retry): %s", pending, err)
        self._alarm_set(
            AlarmKind.STORAGE_FAILED,
            "storage",
            True,
            f"measurements cannot be stored ({pending} waiting, kept and retried): {err}",
        )

    def _alarm_set(self, kind: AlarmKind, source: str, active: bool, message: str) -> None:
        """The service's own alarms (devices, storage): the first wording stays while active."""
        if active and self.alarms.is_active(kind, source):
            return
        self._apply_alarm(AlarmCondition(kind, source, active, message))

    # ------------------------------------------------------------------------------ devices

    async def _supervise(self, runtime: DeviceRuntime) -> None:
        """Keep one device connected for ever: open with backoff, read, notice loss, repeat."""
        cfg = runtime.config
        driver = create_driver(cfg.driver, cfg.name, cfg.options)
        while True:
            async for attempt in AsyncRetrying(
                retry=retry_if_exception_type(DriverError),
                # At least max_gap_s between a loss and the reopen: the capture engine then
                # restarts every window, so none joins samples across the disconnect.
                # The backoff counts failed opens since the device was last up, not every loss
                # ever: otherwise it stuck at the maximum after a few unplugs and a replugged
                # device waited 5 s (found by tests/bench/drills.py, 50 unplugs).
                wait=lambda state: self.reopen_wait_s(runtime),
                before_sleep=lambda state: self._device_down(runtime, state.outcome),
            ):
                with attempt:
                    transport = self._transport(cfg)
                    session = DeviceSession(
                        cfg.name,
                        driver,
                        transport,
                        clock=self._clock,
                        silence_timeout_s=cfg.silence_limit_s,
                    )
                    await self._read_session(runtime, session)

    def _transport(self, cfg: DeviceConfig) -> Transport:
        """The device's transport; with ``record_dir`` wrapped in one recorder per device.

        The recorder outlives reconnects (its inner transport is replaced), so the file keeps
        one timeline across them.
        """
        inner = open_transport(cfg.address, cfg.transport_options)
        if self.record_dir is None:
            return inner
        recorder = self._recorders.get(cfg.name)
        if recorder is None:
            self.record_dir.mkdir(parents=True, exist_ok=True)
            writer = RecordingWriter(
                self.record_dir / f"{cfg.name}.jsonl",
                RecordingHeader(
                    device=cfg.name,
                    driver=cfg.driver,
                    options=cfg.options,
                    created_utc=self._clock_utc(),
                    description=f"heft run of station {self.config.station}",
                ),
            )
            recorder = RecordingTransport(inner, writer, clock=self._clock)
            self._recorders[cfg.name] = recorder
        else:
            recorder.inner = inner
        return recorder

    @property
    def _reopen_min_wait_s(self) -> float:
        return max(0.2, 1.2 * self.config.capture.max_gap_s)

    def reopen_wait_s(self, runtime: DeviceRuntime) -> float:
        """Seconds before the next open of a lost device: exponential in its failed opens."""
        backoff = 0.1 * 2.0 ** min(runtime.failed_opens, 16)
        return min(RECONNECT_MAX_WAIT_S, max(self._reopen_min_wait_s, backoff))

    async def _read_session(self, runtime: DeviceRuntime, session: DeviceSession) -> None:
        """Read one session until it fails; raises TransportError when the port goes."""
        assert self.pipeline is not None
        runtime.session = session
        try:
            async for output in session.outputs():
                if not runtime.connected:
                    self._device_up(runtime, session)
                if isinstance(output, Reading) and output.channel == 0:
                    runtime.readings += 1
                    runtime.last_value = output.value
                    runtime.last_t_mono_s = output.t_mono_s
                elif isinstance(output, DeviceInfo):
                    self._check_channel_count(output)
                self._route(self.pipeline.feed(output))
        finally:
            runtime.session = None
        raise TransportError(f"device {runtime.config.name!r}: the port closed")

    def _check_channel_count(self, info: DeviceInfo) -> None:
        """A beam says how many channels it has (HELLO): name config channels beyond them.

        The config check cannot know a beam's channel count; a geometry channel it does not
        have would otherwise never read anything, silently.
        """
        wanted = sorted({*self.config.geometry.channels, *self.config.channels})
        refs = [ChannelRef.parse(ch) for ch in wanted]
        missing = [
            str(ref) for ref in refs if ref.device == info.device and ref.index >= info.channels
        ]
        if missing:
            log.error(
                "device %s has %d channel(s) (%s/0 to %s/%d) but the config uses %s: check "
                "[geometry] and [channels]",
                info.device, info.channels, info.device, info.device, info.channels - 1,
                ", ".join(missing),
            )

    def _device_up(self, runtime: DeviceRuntime, session: DeviceSession) -> None:
        runtime.connected = True
        runtime.failed_opens = 0
        runtime.down_logged = False
        runtime.rate_t0, runtime.rate_n0 = self._clock(), runtime.readings
        name = runtime.config.name
        log.info("device %s connected (%s)", name, session.transport.description)
        self._alarm_set(AlarmKind.DEVICE_OFFLINE, name, False, f"device {name} is back")
        self._publish_device(runtime)

    def _device_down(self, runtime: DeviceRuntime, outcome: Any) -> None:
        err = outcome.exception() if outcome is not None else None
        name = runtime.config.name
        was_connected = runtime.connected
        runtime.connected = False
        runtime.sample_rate_hz = None
        if not was_connected:
            runtime.failed_opens += 1
        if was_connected:
            log.warning("device %s lost: %s", name, err)
        elif not runtime.down_logged:  # a port that never opened (wrong path, unplugged)
            log.warning(
                "device %s: cannot open %s (%s); retrying every few seconds",
                name, runtime.config.address, err,
            )
        runtime.down_logged = True
        assert self.pipeline is not None
        self._route(self.pipeline.device_lost(name))
        self._alarm_set(
            AlarmKind.DEVICE_OFFLINE,
            name,
            True,
            f"device {name} ({runtime.config.address}) is offline: {err}",
        )
        if was_connected:
            self._publish_device(runtime)

    def _publish_device(self, runtime: DeviceRuntime) -> None:
        session = runtime.session
        info = self.pipeline.device_info.get(runtime.config.name) if self.pipeline else None
        stats = session.driver.stats if session is not None else None
        self.bus.publish(
            DeviceStatus(
                station=self.config.station,
                device=runtime.config.name,
                connected=runtime.connected,
                port=runtime.config.address,
                sample_rate_hz=runtime.sample_rate_hz,
                frame_errors=stats.frame_errors if stats is not None else 0,
                last_value=runtime.last_value,
                last_t_mono_s=runtime.last_t_mono_s,
                model=info.model if info is not None else "",
                firmware=info.firmware if info is not None else "",
            )
        )

    # ------------------------------------------------------------------------------ ticker

    async def _ticker(self) -> None:
        assert self.pipeline is not None
        watchdog = watchdog_interval_s()
        last_status = last_cal = last_dog = self._clock()
        while True:
            await asyncio.sleep(TICK_S)
            now = self._clock()
            self._route(self.pipeline.tick(now))
            for runtime in self.devices.values():
                # A device allowed to be quiet (a scanner) counts as connected once its port is
                # open; the others once they have sent something.
                session = runtime.session
                if (
                    not runtime.connected
                    and runtime.config.silence_limit_s is None
                    and session is not None
                    and session.is_open
                ):
                    self._device_up(runtime, session)
            if now - last_status >= DEVICE_STATUS_EVERY_S:
                for runtime in self.devices.values():
                    if runtime.connected:
                        span = now - runtime.rate_t0
                        if span > 0:
                            runtime.sample_rate_hz = (runtime.readings - runtime.rate_n0) / span
                        runtime.rate_t0, runtime.rate_n0 = now, runtime.readings
                    self._publish_device(runtime)
                last_status = now
            if now - last_cal >= CALIBRATION_CHECK_EVERY_S and self.calibration is not None:
                self.calibration.check_due()
                last_cal = now
            if watchdog is not None and now - last_dog >= watchdog:
                notify("WATCHDOG=1")
                last_dog = now

    # ------------------------------------------------------------------------------ commands

    async def handle_command(self, cmd: api.Command) -> api.Reply:
        """Carry out one command; always returns a Reply (ok=False naming what was wrong)."""
        if self.commands is None:
            return api.Reply(ok=False, command=cmd.command, request_id=cmd.request_id,
                             message="service not running")
        return await self.commands.handle(cmd)

    async def _zero_scale(self, name: str) -> None:
        """Send a scale its own zero command."""
        session = self.devices[name].session
        if session is None:
            raise TransportError(f"device {name!r} is not connected")
        reply = await session.send_command("zero", reply_timeout_s=2.0)
        if reply is not None and not reply.ok:
            raise SelectionError(f"device {name} refused to zero: {reply.detail}")
