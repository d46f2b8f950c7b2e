"""A geometry channel the beam does not have is named when the beam says how many it has.

The config check cannot know a beam's channel count (its HELLO line says it, docs/protocols.md);
the simulated beam (drivers/sim/definition_files/beam.json) has two. Real pty, real pyserial.
"""

from __future__ import annotations

import asyncio
import contextlib
import logging
import tomllib
from pathlib import Path

import pytest

from heft.daemon.config import parse_config
from heft.daemon.service import Service
from heft.drivers.sim.pty_server import PtyDevice
from tests.mqtt_helpers import wait_until
from tests.service_bench import beam_device, station_toml


async def test_a_channel_beyond_the_beams_count_is_logged_naming_it(
    tmp_path: Path, caplog: pytest.LogCaptureFixture
) -> None:
    text = station_toml(port=str(tmp_path / "beam"), db=tmp_path / "heft.db", calibrated=False)
    text = text.replace('channel_b = "beam/1"', 'channel_b = "beam/7"')
    text = text.replace('[channels."beam/1"]', '[channels."beam/7"]')
    config = parse_config(tomllib.loads(text))  # passes: the count is not known yet
    caplog.set_level(logging.ERROR, logger="heft.service")
    pty = PtyDevice(beam_device([]), link=tmp_path / "beam").start()
    service = Service(config)
    task = asyncio.create_task(service.run())
    try:
        await wait_until(
            lambda: any("beam/7" in r.getMessage() for r in caplog.records),
            timeout_s=30, what="the missing channel named in the log",
        )
    finally:
        task.cancel()
        with contextlib.suppress(asyncio.CancelledError):
            await task
        await asyncio.to_thread(pty.close)
    (message,) = {r.getMessage() for r in caplog.records if "beam/7" in r.getMessage()}
    assert message.startswith("device beam has 2 channel(s) (beam/0 to beam/1)")
