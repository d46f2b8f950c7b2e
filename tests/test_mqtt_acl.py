"""deploy/mosquitto/heft.acl on a real Mosquitto with users made by ``mosquitto_passwd -b``.

The broker started here uses the shipped ACL file as it is, so a change to it that locks the
station out (or lets a dashboard write measurements) fails here.
"""

from __future__ import annotations

import asyncio
import contextlib
import json
import subprocess
import uuid
from collections.abc import AsyncIterator, Iterator
from pathlib import Path

import aiomqtt
import pytest

from heft.daemon.command_api import Reply
from heft.daemon.command_auth import CommandAuthority
from heft.daemon.events import EventBus
from heft.daemon.mqtt_link import MqttLink
from heft.daemon.mqtt_settings import MqttSettings
from heft.daemon.storage import Store
from tests.mqtt_broker import Broker, free_port
from tests.mqtt_helpers import RecordingHandler, collecting, running, wait_until

DEPLOY = Path(__file__).resolve().parent.parent / "deploy" / "mosquitto"
USERS = {"bench-1": "station-pw-invented", "dashboard": "dash-pw-invented"}


@pytest.fixture
def acl_broker(tmp_path: Path) -> Iterator[Broker]:
    """Mosquitto with the shipped ACL, anonymous clients refused, two users."""
    passwd = tmp_path / "heft.passwd"
    for n, (user, password) in enumerate(USERS.items()):
        create = ["-c"] if n == 0 else []
        subprocess.run(
            ["mosquitto_passwd", *create, "-b", str(passwd), user, password],
            check=True, capture_output=True, timeout=30,
        )
    conf = DEPLOY / "heft.conf"
    assert "allow_anonymous false" in conf.read_text()  # what the fixture copies below
    b = Broker(
        workdir=tmp_path,
        port=free_port(),
        extra_conf=(
            "allow_anonymous false\n"
            f"password_file {passwd}\n"
            f"acl_file {DEPLOY / 'heft.acl'}\n"
        ),
    )
    b.start()
    try:
        yield b
    finally:
        b.stop()


@contextlib.asynccontextmanager
async def as_user(broker: Broker, user: str) -> AsyncIterator[aiomqtt.Client]:
    async with aiomqtt.Client(
        broker.host, broker.port, identifier=f"{user}-{uuid.uuid4().hex[:6]}",
        username=user, password=USERS[user], protocol=aiomqtt.ProtocolVersion.V311,
    ) as client:
        yield client


async def test_anonymous_and_wrong_password_are_refused(acl_broker: Broker) -> None:
    with pytest.raises(aiomqtt.MqttError):
        async with aiomqtt.Client(acl_broker.host, acl_broker.port, identifier="anon"):
            pass
    with pytest.raises(aiomqtt.MqttError):
        async with aiomqtt.Client(
            acl_broker.host, acl_broker.port, identifier="guess",
            username="dashboard", password="not-it",
        ):
            pass


async def test_dashboard_reads_and_commands_but_cannot_publish_a_measurement(
    acl_broker: Broker,
) -> None:
    measurement = "heft/bench-1/measurement"
    async with (
        collecting(acl_broker, "heft/#", username="dashboard", password=USERS["dashboard"],
                   protocol=aiomqtt.ProtocolVersion.V311) as (_, seen),
        as_user(acl_broker, "bench-1") as station,
        as_user(acl_broker, "dashboard") as dash,
    ):
        await station.subscribe("heft/bench-1/cmd", qos=1)
        await dash.publish(measurement, b"from-dashboard", qos=1)  # refused: silently dropped
        await station.publish("heft/qc-1/measurement", b"other-station", qos=1)  # not its own
        await station.publish(measurement, b"from-station", qos=1)
        await dash.publish("heft/bench-1/cmd", b'{"command": "ping"}', qos=1)

        async def first_command() -> bytes:
            async for msg in station.messages:
                return bytes(msg.payload)  # type: ignore[arg-type]
            raise AssertionError("the station's message stream ended")

        assert await asyncio.wait_for(first_command(), 10) == b'{"command": "ping"}'
        await wait_until(lambda: bool(seen.on(measurement)), what="the station's measurement")
        await wait_until(lambda: bool(seen.on("heft/bench-1/cmd")), what="the command")
        await asyncio.sleep(0.3)  # anything refused would have been delivered by now
    assert seen.payloads(measurement) == [b"from-station"]
    assert seen.on("heft/qc-1/measurement") == []


async def test_the_station_link_works_within_its_acl(acl_broker: Broker, tmp_path: Path) -> None:
    """The real link, as user bench-1: status and replies go out, commands come in."""
    settings = MqttSettings.model_validate({
        "host": acl_broker.host, "port": acl_broker.port, "topic_root": "heft",
        "keepalive_s": 5, "username": "bench-1", "password": USERS["bench-1"],
    })
    store = Store(tmp_path / "acl.db")
    handler = RecordingHandler()
    link = MqttLink(
        settings, "bench-1", store, EventBus(), handler, authority=CommandAuthority({})
    )
    try:
        async with (
            running(link),
            collecting(acl_broker, "heft/bench-1/#", username="dashboard",
                       password=USERS["dashboard"]) as (dash, got),
        ):
            await wait_until(lambda: bool(got.on("heft/bench-1/status")), what="status online")
            await dash.publish("heft/bench-1/cmd", json.dumps({"command": "ping"}), qos=1)
            await dash.publish("heft/bench-1/cmd", json.dumps({"command": "tare"}), qos=1)
            await wait_until(lambda: len(got.on("heft/bench-1/cmd/reply")) == 2, what="replies")
    finally:
        store.close()
    ping, tare = (Reply.model_validate_json(p) for p in got.payloads("heft/bench-1/cmd/reply"))
    assert ping.ok
    # The broker let the dashboard user's tare through; the station refused it (no keys).
    assert not tare.ok and "no operator keys" in tare.message
    assert [c.command for c in handler.commands] == ["ping"]
