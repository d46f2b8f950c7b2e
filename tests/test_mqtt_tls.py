"""TLS with a private CA, and username/password, against a real Mosquitto listener."""

from __future__ import annotations

import asyncio
import logging
from pathlib import Path

import aiomqtt
import pytest

from heft.daemon.events import EventBus, MeasurementCaptured
from heft.daemon.measurement import Measurement
from heft.daemon.mqtt_link import MqttLink
from heft.daemon.storage import Store
from tests.mqtt_broker import Broker
from tests.mqtt_helpers import collecting, running, stop_task, wait_until
from tests.mqtt_tls import PASSWORD, USER, needs_tls_tools, tls_settings
from tests.mqtt_tls import tls_broker as tls_broker  # a fixture
from tests.sample_records import make_measurement

pytestmark = needs_tls_tools

async def test_measurement_over_tls_with_password(
    tls_broker: tuple[Broker, int, Path], tmp_path: Path
) -> None:
    broker, port, ca = tls_broker
    bus = EventBus()
    with Store(tmp_path / "tls.db") as store:
        link = MqttLink(tls_settings(port, ca, PASSWORD), "bench-1", store, bus)
        client_tls = {
            "tls_params": aiomqtt.TLSParameters(ca_certs=str(ca)),
            "username": USER,
            "password": PASSWORD,
        }
        async with (
            collecting(broker, link.topics.measurement, port=port, **client_tls) as (_, got),
            running(link),
        ):
            m = make_measurement(1)
            store.add_measurement(m)
            bus.publish(MeasurementCaptured(measurement=m))
            await wait_until(lambda: bool(got.messages), what="measurement over TLS")
        assert Measurement.model_validate_json(got.payloads(link.topics.measurement)[0]) == m


async def test_wrong_password_is_retried_not_fatal(
    tls_broker: tuple[Broker, int, Path], tmp_path: Path, caplog: pytest.LogCaptureFixture
) -> None:
    _, port, ca = tls_broker
    caplog.set_level(logging.WARNING, logger="heft.daemon.mqtt_link")
    with Store(tmp_path / "bad.db") as store:
        link = MqttLink(
            tls_settings(port, ca, "not-the-password"),
            "bench-1",
            store,
            EventBus(),
            retry_initial_s=0.1,
            retry_max_s=0.2,
        )
        task = asyncio.create_task(link.run())
        try:
            await wait_until(
                lambda: any("attempt 3" in r.getMessage() for r in caplog.records),
                what="three refused connection attempts",
            )
            assert not task.done()  # still trying: a refused login never ends the service
            assert not link.connected
        finally:
            await stop_task(task, "MqttLink.run")
