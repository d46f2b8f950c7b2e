"""The station's MQTT socket sends small packets at once (TCP_NODELAY).

With Nagle's algorithm on, a small publish waits until the broker has acknowledged the previous
one; with the broker's delayed ACK (up to 40 ms on Linux, RFC 1122 4.2.3.2 allows up to 500 ms)
that added tens of milliseconds to every measurement (measured: tests/bench/pipeline_bench.py).
"""

from __future__ import annotations

import socket
from pathlib import Path

from heft.daemon.events import EventBus
from heft.daemon.mqtt_link import MqttLink
from heft.daemon.storage import Store
from tests.mqtt_broker import Broker
from tests.mqtt_helpers import settings_for


async def test_link_socket_has_tcp_nodelay(broker: Broker, tmp_path: Path) -> None:
    with Store(tmp_path / "heft.db") as store:
        link = MqttLink(settings_for(broker), "bench-1", store, EventBus())
        async with link.make_client() as client:
            sock = client._client.socket()  # paho's socket, reached into on purpose
            assert isinstance(sock, socket.socket)
            assert sock.getsockopt(socket.IPPROTO_TCP, socket.TCP_NODELAY) != 0
