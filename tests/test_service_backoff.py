"""Reconnect backoff of a device: it grows while the port stays away and starts over once the
device is back, so a bench unplugged many times still reconnects promptly.

Found by the unplug drill (tests/bench/drills.py --long): with the backoff counting every loss
ever, it reached its 5 s maximum after a few unplugs and clubs were missed while the replugged
beam waited. Real pty, real pyserial; every wait polls with a generous timeout.
"""

from __future__ import annotations

import asyncio
import contextlib
import logging
from pathlib import Path

import pytest

from heft.daemon.events import AlarmKind
from heft.daemon.service import RECONNECT_MAX_WAIT_S, Service
from heft.drivers.sim.pty_server import PtyDevice
from tests.mqtt_helpers import wait_until
from tests.service_bench import beam_device, station_config


async def test_backoff_restarts_after_each_reconnect(tmp_path: Path) -> None:
    config = station_config(port=str(tmp_path / "beam"), db=tmp_path / "heft.db")
    pty = PtyDevice(beam_device([]), link=tmp_path / "beam").start()
    service = Service(config)
    task = asyncio.create_task(service.run())
    runtime = service.devices["beam"]
    minimum = service.reopen_wait_s(runtime)
    try:
        await asyncio.wait_for(service.ready.wait(), timeout=15)
        for _ in range(4):
            await wait_until(lambda: runtime.connected, timeout_s=20, what="beam connected")
            assert runtime.failed_opens == 0
            assert service.reopen_wait_s(runtime) == minimum  # a fresh start after each loss
            await asyncio.to_thread(pty.unplug)
            # While the port is missing, every failed open doubles the wait.
            await wait_until(lambda: runtime.failed_opens >= 3, timeout_s=20,
                             what="three failed reopens")
            assert minimum < service.reopen_wait_s(runtime) <= RECONNECT_MAX_WAIT_S
            await asyncio.to_thread(pty.replug)
        await wait_until(lambda: runtime.connected, timeout_s=20, what="beam back")
        assert runtime.failed_opens == 0
    finally:
        task.cancel()
        with contextlib.suppress(asyncio.CancelledError):
            await task
        await asyncio.to_thread(pty.close)


async def test_a_port_that_never_opens_is_logged_once_and_raises_the_offline_alarm(
    tmp_path: Path, caplog: pytest.LogCaptureFixture
) -> None:
    # QA: `heft run` with a port that does not exist logged only "running: 1 device(s)".
    missing = tmp_path / "no-such-beam"
    service = Service(station_config(port=str(missing), db=tmp_path / "heft.db"))
    runtime = service.devices["beam"]
    caplog.set_level(logging.WARNING, logger="heft.service")
    task = asyncio.create_task(service.run())
    try:
        await asyncio.wait_for(service.ready.wait(), timeout=15)
        await wait_until(lambda: runtime.failed_opens >= 3, timeout_s=30,
                         what="three failed opens")
        assert service.alarms.is_active(AlarmKind.DEVICE_OFFLINE, "beam")
    finally:
        task.cancel()
        with contextlib.suppress(asyncio.CancelledError):
            await task
    warnings = [r.getMessage() for r in caplog.records if r.name == "heft.service"]
    assert len(warnings) == 1, warnings  # one line, not one per retry
    assert "device beam" in warnings[0] and str(missing) in warnings[0]
