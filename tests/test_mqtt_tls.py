"""TLS with a private CA, and username/password, against a real Mosquitto listener."""

from __future__ import annotations

import asyncio
import logging
import shutil
import subprocess
from pathlib import Path

import aiomqtt
import pytest

from heft.daemon.events import EventBus, MeasurementCaptured
from heft.daemon.measurement import Measurement
from heft.daemon.mqtt_link import MqttLink
from heft.daemon.mqtt_settings import MqttSettings, TlsSettings
from heft.daemon.storage import Store
from tests.mqtt_broker import Broker, free_port
from tests.mqtt_helpers import collecting, running, stop_task, unique_root, wait_until
from tests.sample_records import make_measurement

pytestmark = pytest.mark.skipif(
    not (shutil.which("openssl") and shutil.which("mosquitto_passwd")),
    reason="needs the openssl and mosquitto_passwd programs",
)

USER, PASSWORD = "bench-1", "larkspur-test-pass"


def _run(*cmd: str | Path) -> None:
    subprocess.run([str(c) for c in cmd], check=True, capture_output=True, timeout=30)


def _make_pki(d: Path) -> tuple[Path, Path, Path]:
    """A throwaway CA and a server certificate for 127.0.0.1 (EC keys: quick to make)."""
    ec = ("-newkey", "ec", "-pkeyopt", "ec_paramgen_curve:prime256v1", "-nodes")
    _run(
        "openssl",
        "req",
        "-x509",
        *ec,
        "-days",
        "2",
        "-subj",
        "/CN=heft test CA",
        "-keyout",
        d / "ca.key",
        "-out",
        d / "ca.crt",
    )
    _run(
        "openssl",
        "req",
        *ec,
        "-subj",
        "/CN=127.0.0.1",
        "-keyout",
        d / "server.key",
        "-out",
        d / "server.csr",
    )
    (d / "san.ext").write_text("subjectAltName=IP:127.0.0.1\n")
    _run(
        "openssl",
        "x509",
        "-req",
        "-in",
        d / "server.csr",
        "-CA",
        d / "ca.crt",
        "-CAkey",
        d / "ca.key",
        "-CAcreateserial",
        "-days",
        "2",
        "-extfile",
        d / "san.ext",
        "-out",
        d / "server.crt",
    )
    return d / "ca.crt", d / "server.crt", d / "server.key"


@pytest.fixture
def tls_broker(broker: Broker, tmp_path: Path) -> tuple[Broker, int, Path]:
    """The fixture's broker restarted with a second, TLS-only listener that needs a password."""
    pki = tmp_path / "pki"
    pki.mkdir()
    ca, cert, key = _make_pki(pki)
    passwords = tmp_path / "passwords"
    _run("mosquitto_passwd", "-c", "-b", passwords, USER, PASSWORD)
    tls_port = free_port()
    broker.stop()
    broker.extra_conf = (
        "allow_anonymous false\n"
        f"password_file {passwords}\n"
        f"listener {tls_port} 127.0.0.1\n"
        f"cafile {ca}\ncertfile {cert}\nkeyfile {key}\n"
    )
    broker.start()
    return broker, tls_port, ca


def _tls_settings(port: int, ca: Path, password: str) -> MqttSettings:
    return MqttSettings(
        host="127.0.0.1",
        port=port,
        username=USER,
        password=password,  # type: ignore[arg-type]  # pydantic turns it into a SecretStr
        tls=TlsSettings(ca_file=ca),
        topic_root=unique_root(),
        keepalive_s=5,
    )


async def test_measurement_over_tls_with_password(
    tls_broker: tuple[Broker, int, Path], tmp_path: Path
) -> None:
    broker, port, ca = tls_broker
    bus = EventBus()
    with Store(tmp_path / "tls.db") as store:
        link = MqttLink(_tls_settings(port, ca, PASSWORD), "bench-1", store, bus)
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
            _tls_settings(port, ca, "not-the-password"),
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
