"""The last will: an abruptly killed station shows 'offline' on its retained status topic."""

from __future__ import annotations

import asyncio
import os
import signal
import sys
from pathlib import Path

from tests.mqtt_broker import Broker
from tests.mqtt_helpers import collecting, settings_for, wait_until

ROOT = Path(__file__).resolve().parents[1]

STATION = """
import asyncio, sys
from heft.daemon.events import EventBus
from heft.daemon.mqtt_link import MqttLink
from heft.daemon.mqtt_settings import MqttSettings
from heft.daemon.storage import Store

async def main() -> None:
    settings = MqttSettings.model_validate_json(sys.argv[1])
    link = MqttLink(settings, "bench-1", Store(sys.argv[2]), EventBus())
    task = asyncio.create_task(link.run())
    await link.wait_connected()
    print("connected", flush=True)
    await task

asyncio.run(main())
"""


async def test_last_will_marks_a_killed_station_offline(broker: Broker, tmp_path: Path) -> None:
    settings = settings_for(broker)
    status = f"{settings.topic_root}/bench-1/status"
    proc = await asyncio.create_subprocess_exec(
        sys.executable,
        "-c",
        STATION,
        settings.model_dump_json(),
        str(tmp_path / "will.db"),
        stdout=asyncio.subprocess.PIPE,
        cwd=ROOT,
        env={**os.environ, "PYTHONPATH": str(ROOT)},
    )
    try:
        assert proc.stdout is not None
        line = await asyncio.wait_for(proc.stdout.readline(), timeout=20)
        assert line.strip() == b"connected"
        async with collecting(broker, status) as (_, got):
            await wait_until(lambda: got.payloads(status) == [b"online"], what="online status")
            proc.send_signal(signal.SIGKILL)  # no orderly 'offline' possible: the will must do it
            assert await asyncio.wait_for(proc.wait(), timeout=10) == -signal.SIGKILL
            await wait_until(
                lambda: got.payloads(status)[-1:] == [b"offline"], what="the last will"
            )
    finally:
        if proc.returncode is None:
            proc.kill()
            await proc.wait()
    # And the will was retained: a subscriber arriving later still sees the station offline.
    async with collecting(broker, status) as (_, late):
        await wait_until(lambda: bool(late.messages), what="retained offline")
        assert late.messages[0].retain
        assert late.payloads(status) == [b"offline"]
