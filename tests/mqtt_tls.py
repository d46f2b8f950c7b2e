"""A private CA and a Mosquitto TLS listener that needs a password, made for one test."""

from __future__ import annotations

import shutil
import subprocess
from pathlib import Path

import pytest

from heft.daemon.mqtt_settings import MqttSettings, TlsSettings
from tests.mqtt_broker import Broker, free_port
from tests.mqtt_helpers import unique_root

needs_tls_tools = pytest.mark.skipif(
    not (shutil.which("openssl") and shutil.which("mosquitto_passwd")),
    reason="needs the openssl and mosquitto_passwd programs",
)

USER, PASSWORD = "bench-1", "larkspur-test-pass"


def run_tool(*cmd: str | Path) -> None:
    subprocess.run([str(c) for c in cmd], check=True, capture_output=True, timeout=30)


def make_pki(d: Path) -> tuple[Path, Path, Path]:
    """A throwaway CA and a server certificate for 127.0.0.1 (EC keys: quick to make)."""
    ec = ("-newkey", "ec", "-pkeyopt", "ec_paramgen_curve:prime256v1", "-nodes")
    run_tool(
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
    run_tool(
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
    run_tool(
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
    ca, cert, key = make_pki(pki)
    passwords = tmp_path / "passwords"
    run_tool("mosquitto_passwd", "-c", "-b", passwords, USER, PASSWORD)
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


def tls_settings(port: int, ca: Path, password: str) -> MqttSettings:
    return MqttSettings(
        host="127.0.0.1",
        port=port,
        username=USER,
        password=password,  # type: ignore[arg-type]  # pydantic turns it into a SecretStr
        tls=TlsSettings(ca_file=ca),
        topic_root=unique_root(),
        keepalive_s=5,
    )
