"""Drill: hostile payloads on a station's command topic while an operator probes it.

A real station (``heft run`` on a simulated beam, Mosquitto, SQLite; its config has no operator
keys, as a new one has none) measures clubs while, for ``duration_s``:

* an attacker publishes a 10 kB nested-JSON payload (``[[[[…]]]]``, 5000 deep) once a second,
  the payload that used to raise RecursionError and drop the link;
* an anonymous client sends an unsigned state-changing command (tare, zero, span, verify, job,
  spec, acknowledge, re-arm in turn) once a second;
* a prober sends a read-only ``ping`` every 0.2 s over MQTT 5 and times each reply.

It reports the share of pings answered within 1 s, the state-changing commands accepted (must be
0), whether the station's link ever reconnected, and the measurements lost (as every drill).
"""

from __future__ import annotations

import asyncio
import contextlib
import json
import time
import uuid
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import aiomqtt
from paho.mqtt.packettypes import PacketTypes
from paho.mqtt.properties import Properties

from tests.bench.drills import ON_S, PERIOD_S, DrillResult, integrity, log_times, station, tally
from tests.bench.drills import window as placed_within
from tests.bench.rig import demo_plan

NESTED = ("[" * 5000 + "]" * 5000).encode()
PROBE_EVERY_S = 0.2
PROBE_DEADLINE_S = 1.0
ANSWERED_GOAL = 0.99
STATE_CHANGING: tuple[dict[str, Any], ...] = (
    {"command": "tare"},
    {"command": "zero"},
    {"command": "calibrate_span", "channel": "beam/0", "mass_g": 200.0},
    {"command": "verify", "channel": "beam/0", "mass_g": 100.0},
    {"command": "select_job", "job": "larkspur-irons"},
    {"command": "select_spec", "spec": "irons-d2"},
    {"command": "ack_alarm", "key": "overload:beam/0"},
    {"command": "rearm"},
)


@dataclass
class FloodResult(DrillResult):
    probes: int = 0
    answered_in_time: int = 0
    accepted_anonymous: int = 0
    reconnects: int = 0
    latencies_s: list[float] = field(default_factory=list)

    @property
    def answered_share(self) -> float:
        return self.answered_in_time / self.probes if self.probes else 0.0

    @property
    def ok(self) -> bool:
        return (
            super().ok
            and self.answered_share >= ANSWERED_GOAL
            and self.accepted_anonymous == 0
            and self.reconnects == 0
        )


async def command_flood(work: Path, duration_s: float) -> FloodResult:
    result = FloodResult(f"command flood {duration_s:g} s")
    plan = demo_plan(count=int((duration_s + 20) / PERIOD_S) + 2, period_s=PERIOD_S, on_s=ON_S,
                     start_s=4.0)
    async with station(work, plan) as st:
        cmd_topic = f"{st.base}/cmd"
        reply_topic = f"{st.base}/cmd/reply/drill"
        sent: dict[str, float] = {}
        answered: dict[str, float] = {}
        anonymous_ok: list[dict[str, Any]] = []
        t_begin = time.monotonic()
        host, port = st.broker.host, st.broker.port
        async with (
            aiomqtt.Client(host, port, identifier=f"prober-{uuid.uuid4().hex[:6]}",
                           protocol=aiomqtt.ProtocolVersion.V5) as prober,
            aiomqtt.Client(host, port, identifier=f"attacker-{uuid.uuid4().hex[:6]}") as attacker,
        ):
            await prober.subscribe(f"{st.base}/cmd/reply/#", qos=1)

            async def read_replies() -> None:
                async for msg in prober.messages:
                    reply = json.loads(bytes(msg.payload))  # type: ignore[arg-type]
                    rid = reply.get("request_id") or ""
                    if rid.startswith("probe-"):
                        answered.setdefault(rid, time.monotonic())
                    elif rid.startswith("anon-") and reply.get("ok"):
                        anonymous_ok.append(reply)

            async def probe() -> None:
                n = 0
                while time.monotonic() - t_begin < duration_s:
                    rid = f"probe-{n}"
                    props = Properties(PacketTypes.PUBLISH)  # type: ignore[no-untyped-call]
                    props.ResponseTopic = reply_topic
                    sent[rid] = time.monotonic()
                    await prober.publish(cmd_topic, json.dumps(
                        {"command": "ping", "request_id": rid}), qos=1, properties=props)
                    n += 1
                    await asyncio.sleep(PROBE_EVERY_S)

            async def attack() -> None:
                n = 0
                while time.monotonic() - t_begin < duration_s:
                    await attacker.publish(cmd_topic, NESTED, qos=0)
                    cmd = {**STATE_CHANGING[n % len(STATE_CHANGING)], "request_id": f"anon-{n}"}
                    await prober.publish(cmd_topic, json.dumps(cmd), qos=1)  # no signature
                    n += 1
                    await asyncio.sleep(1.0)

            reader = asyncio.create_task(read_replies())
            try:
                await asyncio.gather(probe(), attack())
                await asyncio.sleep(PROBE_DEADLINE_S + 0.5)  # the last probes' replies
            finally:
                reader.cancel()
                with contextlib.suppress(asyncio.CancelledError):
                    await reader
        t_end = time.monotonic()
        await st.drain(30)
        assert st.heft is not None
        st.heft.stop()
        result.probes = len(sent)
        result.repetitions = result.probes
        result.latencies_s = [answered[r] - t for r, t in sent.items() if r in answered]
        result.answered_in_time = sum(1 for s in result.latencies_s if s <= PROBE_DEADLINE_S)
        result.detect_s = result.latencies_s  # reported as median / max reply time
        result.accepted_anonymous = len(anonymous_ok)
        connects = [t for t in log_times(st.work / "heft.log", "MQTT connected") if t >= t_begin]
        result.reconnects = len(connects)
        result.notes.append(
            f"{result.answered_in_time}/{result.probes} pings answered within "
            f"{PROBE_DEADLINE_S:g} s ({100 * result.answered_share:.1f} %); "
            f"{result.accepted_anonymous} unsigned state-changing commands accepted; "
            f"{result.reconnects} reconnects of the station's link"
        )
        bench_t0 = t_begin - st.t0
        tally(st, result, placed_within(bench_t0 + 2.0, t_end - st.t0 - 1.0))
        result.integrity_failures += 0 if integrity(st.db) else 1
    return result
