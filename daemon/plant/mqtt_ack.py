"""An MQTT client for a plant collector that acknowledges a message only after storing it.

QoS 1 alone is at-least-once *delivery* to the client library, not to the database: paho, and so
aiomqtt, sends the PUBACK as soon as the message is handed to the application, so a collector
killed between receiving and committing would lose that message (the broker considers it done).
A collector therefore turns automatic acknowledgement off and sends the PUBACK itself after the
transaction committed. If it dies first, the broker still holds the message in the collector's
persistent session and sends it again (DUP set) when the collector reconnects; the idempotent
writer turns that repeat into a no-op.

aiomqtt 2.5 (our pinned client) has no public switch for this (upstream: empicano/aiomqtt issue
#345, draft PR #346, not merged). The paho client it wraps has had one since paho-mqtt 2.0:
``manual_ack_set(True)`` and ``ack(mid, qos)``. We reach it through aiomqtt's ``_client``
attribute, in this module only, and set it *before* connecting: a resumed session delivers its
queued messages right after CONNACK, before any code after ``async with client`` could run.
tests/test_plant_mqtt_ack.py proves the whole path against a real Mosquitto.

MQTT requires PUBACKs in the order the PUBLISH packets arrived (MQTT 5.0, 4.6 "Message
ordering"), so a collector stores and acknowledges messages one after the other, in arrival order.
"""

from __future__ import annotations

from typing import Any

import aiomqtt
from paho.mqtt.enums import MQTTErrorCode
from paho.mqtt.packettypes import PacketTypes
from paho.mqtt.properties import Properties

DEFAULT_SESSION_EXPIRY_S = 7 * 24 * 3600  # a collector may be down over a long weekend


def shared_filter(group: str, topic_root: str = "heft", leaf: str = "measurement") -> str:
    """``$share/<group>/<root>/+/<leaf>``: each message goes to one collector of the group."""
    for name, value in (("group", group), ("topic_root", topic_root), ("leaf", leaf)):
        if not value or any(c in value for c in "+#") or (name == "group" and "/" in value):
            raise ValueError(f"{name}: expected a topic level without '+', '#' (got {value!r})")
    return f"$share/{group}/{topic_root}/+/{leaf}"


def collector_client(
    hostname: str,
    port: int,
    identifier: str,
    *,
    session_expiry_s: int = DEFAULT_SESSION_EXPIRY_S,
    **options: Any,
) -> aiomqtt.Client:
    """An MQTT 5 client with a persistent session and manual acknowledgement (see ``ack``).

    ``identifier`` must be stable per collector: the broker keeps the session, and with it every
    message not yet acknowledged, under that client id for ``session_expiry_s``.
    """
    properties = Properties(PacketTypes.CONNECT)  # type: ignore[no-untyped-call]  # paho is untyped
    properties.SessionExpiryInterval = session_expiry_s
    client = aiomqtt.Client(
        hostname,
        port,
        identifier=identifier,
        protocol=aiomqtt.ProtocolVersion.V5,
        clean_start=False,
        properties=properties,
        **options,
    )
    client._client.manual_ack_set(True)  # before connecting; see the module docstring
    return client


def ack(client: aiomqtt.Client, message: aiomqtt.Message) -> bool:
    """Send the PUBACK for ``message``: call it only after the message's row is committed.

    False when it could not be queued (connection gone): harmless, the broker sends the message
    again after the reconnect and the writer answers DUPLICATE.
    """
    if message.qos == 0:
        return True
    return client._client.ack(message.mid, message.qos) == MQTTErrorCode.MQTT_ERR_SUCCESS
