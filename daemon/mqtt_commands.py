"""Commands that reach the station over MQTT: validate, refuse or hand on, and reply.

A reply goes to the command's MQTT 5 response topic with its correlation data when it has
them, else to ``<root>/<station>/cmd/reply`` with the request id echoed (MQTT 3.1.1 clients).
A response topic outside ``<root>/<station>/cmd/reply/#`` is ignored (logged): a command must
not make the station publish where measurements or state are read.

State-changing commands are checked by :mod:`heft.daemon.command_auth` (signed by an operator
key, or an open bench); the operator who signed goes into the command and its reply.

Bad input never reaches the link as an exception: the size is checked before any parsing, and
every decoding problem (invalid UTF-8 or JSON, nesting deep enough to exhaust the parser's
recursion) becomes an error reply.
"""

from __future__ import annotations

import json
import logging
from collections.abc import Awaitable, Callable
from typing import Any

import aiomqtt
from paho.mqtt.packettypes import PacketTypes
from paho.mqtt.properties import Properties

from heft.daemon.command_api import Command, Reply, parse_command
from heft.daemon.command_auth import CommandAuthority
from heft.daemon.mqtt_settings import MqttSettings
from heft.daemon.mqtt_topics import Topics

log = logging.getLogger(__name__)

CommandHandler = Callable[[Command], Awaitable[Reply]]
MAX_COMMAND_BYTES = 16_384  # a command is a small JSON object; anything bigger is refused


class CommandResponder:
    """Answers the commands of one station.

    Args:
        settings: ``commands_enabled`` refuses every command when false.
        topics: the station's topics (the default reply topic).
        handle_command: called with each valid command; None refuses commands.
        authority: who may change the station (signed commands); None refuses every
            state-changing command.
    """

    def __init__(
        self,
        settings: MqttSettings,
        topics: Topics,
        handle_command: CommandHandler | None,
        authority: CommandAuthority | None = None,
    ) -> None:
        self.settings = settings
        self.topics = topics
        self._handle_command = handle_command
        self.authority = authority if authority is not None else CommandAuthority({})

    async def answer(self, client: aiomqtt.Client, msg: aiomqtt.Message) -> None:
        reply = await self.reply_to(raw_payload(msg.payload))
        props = msg.properties
        response_topic = getattr(props, "ResponseTopic", None) if props else None
        correlation = getattr(props, "CorrelationData", None) if props else None
        out_props = None
        if correlation is not None:
            out_props = Properties(PacketTypes.PUBLISH)  # type: ignore[no-untyped-call]  # paho is untyped
            out_props.CorrelationData = correlation
        target = self.topics.cmd_reply
        if isinstance(response_topic, str):
            if self.reply_topic_allowed(response_topic):
                target = response_topic
            else:  # a reply must never land where measurements or state are read
                log.warning(
                    "command response topic %r is outside %s/#; replying on %s",
                    response_topic[:200],
                    self.topics.cmd_reply,
                    self.topics.cmd_reply,
                )
        await client.publish(target, reply.model_dump_json(), qos=1, properties=out_props)

    def reply_topic_allowed(self, topic: str) -> bool:
        """Replies go only under the station's own reply topic (``<root>/<station>/cmd/reply``)."""
        prefix = self.topics.cmd_reply
        return _valid_publish_topic(topic) and (topic == prefix or topic.startswith(prefix + "/"))

    async def reply_to(self, payload: bytes) -> Reply:
        """The reply to one raw command payload (validated, refused or handled); never raises."""
        try:
            return await self._reply_to(payload)
        except Exception as err:  # bad input must never reach the link as an exception
            log.exception("command payload could not be handled")
            return Reply(ok=False, message=f"bad command: {type(err).__name__}")

    async def _reply_to(self, payload: bytes) -> Reply:
        station = self.topics.station
        if len(payload) > MAX_COMMAND_BYTES:  # before any parsing: size bounds the work
            return Reply(
                ok=False,
                message=f"bad command: payload: {len(payload)} bytes, expected at most "
                f"{MAX_COMMAND_BYTES}",
            )
        obj = decode_object(payload)
        if isinstance(obj, Reply):
            return obj
        echo = _request_meta(obj)
        if not self.settings.commands_enabled:
            return Reply(
                ok=False,
                **echo,
                message=f"refused: commands are disabled on station {station} "
                "(mqtt.commands_enabled = false)",
            )
        verdict = self.authority.check(obj)
        parsed = parse_command(verdict.command)
        if isinstance(parsed, Reply):
            return parsed.model_copy(update=echo)
        echo = {"command": parsed.command, "request_id": parsed.request_id}
        if verdict.refusal is not None:
            log.warning("command %s refused: %s", parsed.command, verdict.refusal)
            return Reply(ok=False, **echo, message=verdict.refusal)
        parsed = parsed.model_copy(update={"operator": verdict.operator})
        if self._handle_command is None:
            return Reply(ok=False, **echo, message=f"refused: station {station} takes no commands")
        try:
            reply = await self._handle_command(parsed)
        except Exception as err:  # a failing handler must not take the link down
            log.exception("command %s failed", parsed.command)
            return Reply(ok=False, **echo, message=f"{parsed.command} failed: {err}")
        return reply.model_copy(
            update={
                "command": reply.command or parsed.command,
                "request_id": parsed.request_id,
                "operator": verdict.operator,
            }
        )


def raw_payload(payload: Any) -> bytes:
    if isinstance(payload, bytes | bytearray):
        return bytes(payload)
    if payload is None:
        return b""
    return str(payload).encode()


def decode_object(payload: bytes) -> dict[str, Any] | Reply:
    """The payload as a JSON object, or an error Reply saying why not (never raises)."""
    try:
        obj = json.loads(payload)
    except RecursionError:
        return Reply(ok=False, message="bad command: payload: JSON nested too deep")
    except (ValueError, UnicodeDecodeError) as err:
        return Reply(ok=False, message=f"bad command: payload: not valid JSON ({err})")
    if not isinstance(obj, dict):
        return Reply(ok=False, message="bad command: payload: expected a JSON object")
    return obj


def _request_meta(obj: dict[str, Any]) -> dict[str, str | None]:
    """Best-effort command name and request id of a command, even an invalid one."""
    command, request_id = obj.get("command"), obj.get("request_id")
    return {
        "command": command[:200] if isinstance(command, str) else None,
        "request_id": request_id[:200] if isinstance(request_id, str) else None,
    }


def _valid_publish_topic(topic: str) -> bool:
    return bool(topic) and not any(c in topic for c in "+#\x00") and len(topic.encode()) < 65536
