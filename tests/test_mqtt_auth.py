"""Command authority: only commands signed with an operator's key change the station.

Signatures are HMAC-SHA256 (RFC 2104, Python's ``hmac``); the check value for the canonical form
is RFC 4231 test case 2 ("Jefe"), computed by the standard library the station uses.
"""

from __future__ import annotations

import asyncio
import hashlib
import hmac
import json
import tomllib
import uuid
from pathlib import Path
from typing import Any

import pytest

from heft.daemon.command_api import Reply, parse_command
from heft.daemon.command_auth import (
    CommandAuthority,
    KeyFileError,
    Signer,
    authority_from_config,
    canonical,
    load_keys,
    new_key_file,
    signature,
)
from heft.daemon.config import load_config, parse_config
from heft.daemon.config_example import example_toml
from heft.daemon.events import EventBus
from heft.daemon.mqtt_link import MqttLink
from heft.daemon.mqtt_topics import Topics
from heft.daemon.pipeline import BenchPipeline
from heft.daemon.service import Service
from heft.daemon.storage import Store
from heft.drivers.sim.pty_server import PtyDevice
from heft.tui.cli import build_parser, main
from heft.tui.commands import dash
from tests.mqtt_broker import Broker
from tests.mqtt_helpers import (
    RecordingHandler,
    collecting,
    running,
    settings_for,
    stop_task,
    wait_until,
)
from tests.service_bench import LARKSPUR_CLUBS, beam_device, placements, station_toml
from tests.test_service_single_scale import T0, qc2_config, weighing

KEY = bytes.fromhex("5c" * 32)  # invented test key
NOW = 1_780_000_000.0  # an invented wall-clock time for the unit checks


def test_hmac_sha256_is_rfc_2104_as_rfc_4231_checks_it() -> None:
    # RFC 4231 section 4.3, test case 2: key "Jefe", data "what do ya want for nothing?".
    mac = hmac.new(b"Jefe", b"what do ya want for nothing?", hashlib.sha256).hexdigest()
    assert mac == "5bdcc146bf60754e6a042426089575c75a003f089d2739839dec58b964ec3843"
    body = {"command": "tare", "auth": {"operator": "ana", "ts": 1.5, "nonce": "n"}}
    assert canonical(body) == (
        b'{"auth":{"nonce":"n","operator":"ana","ts":1.5},"command":"tare"}'
    )
    assert signature(b"Jefe", body) == hmac.new(b"Jefe", canonical(body), "sha256").hexdigest()


def _authority(now: float = NOW) -> CommandAuthority:
    return CommandAuthority({"ana": KEY}, clock=lambda: now)


def test_signed_accepted_others_refused() -> None:
    authority = _authority()
    ana = Signer("ana", KEY)
    tare = {"command": "tare", "request_id": "r1"}
    signed = ana.sign(tare, NOW)
    ok = authority.check(signed)
    assert ok.refusal is None and ok.operator == "ana" and ok.command == tare
    forged = Signer("ana", bytes(32)).sign(tare, NOW)
    tampered = {**signed, "device": "beam"}
    stranger = Signer("eve", KEY).sign(tare, NOW)
    cases = {
        "unsigned": (tare, "sign it"),
        "bad key": (forged, "bad signature"),
        "tampered": (tampered, "bad signature"),
        "unknown operator": (stranger, "unknown operator"),
        "replayed": (signed, "replayed"),
        "expired": (ana.sign(tare, NOW - 31), "window"),
        "future": (ana.sign(tare, NOW + 31), "window"),
        "operator claimed": ({**tare, "operator": "ana"}, "operator"),
        "auth not an object": ({**tare, "auth": "ana"}, "auth"),
    }
    for name, (payload, words) in cases.items():
        verdict = authority.check(payload)
        assert verdict.refusal is not None and words in verdict.refusal, name
        assert verdict.operator is None, name
    assert authority.check(ana.sign(tare, NOW + 29)).refusal is None  # inside the window
    assert authority.check({"command": "ping"}).refusal is None  # read-only stays open


def test_no_keys_refuse_and_open_bench_accepts() -> None:
    refused = CommandAuthority({}).check({"command": "rearm"})
    assert refused.refusal is not None and "open_bench" in refused.refusal
    assert CommandAuthority.open().check({"command": "rearm"}).refusal is None


def test_key_files(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    path = tmp_path / "ana.key"
    assert main(["keys", "new", "ana", "--file", str(path)]) == 0
    assert path.stat().st_mode & 0o777 == 0o600
    signer = Signer.from_file(path)
    assert signer.operator == "ana" and len(signer.key) == 32
    assert signer.key.hex() not in repr(signer)
    assert main(["keys", "new", "ana", "--file", str(path)]) == 2  # never overwrites a key
    path.chmod(0o644)
    with pytest.raises(KeyFileError, match="0644 let others read"):
        load_keys(path)
    bad = tmp_path / "bad.key"
    new_key_file(bad, "bo")
    secret = bad.read_text().split()[1]
    bad.write_text(f"bo {secret} extra\n")
    with pytest.raises(KeyFileError) as err:
        load_keys(bad)
    assert secret not in str(err.value) and "line 1" in str(err.value)
    with pytest.raises(KeyFileError, match="operator"):
        new_key_file(tmp_path / "x.key", "no spaces allowed")
    capsys.readouterr()


async def test_over_the_broker_only_signed_commands_change_the_station(
    broker: Broker, tmp_path: Path
) -> None:
    handler = RecordingHandler()
    store = Store(tmp_path / "auth.db")
    authority = CommandAuthority({"ana": KEY})
    link = MqttLink(
        settings_for(broker), "bench-1", store, EventBus(), handler, authority=authority
    )
    ana = Signer("ana", KEY)
    replayed = ana.sign({"command": "rearm", "request_id": "replay"})
    hostile: list[dict[str, Any]] = [
        {"command": "tare", "request_id": "anon"},
        {"command": "calibrate_span", "channel": "beam/0", "mass_g": 200, "request_id": "span"},
        {"command": "select_spec", "spec": "irons-d2", "request_id": "spec"},
        {"command": "ack_alarm", "key": "overload:beam/0", "request_id": "ack"},
        Signer("ana", bytes(32)).sign({"command": "zero", "request_id": "forged"}),
        ana.sign({"command": "verify", "channel": "beam/0", "mass_g": 100,
                  "request_id": "old"}, now_s=1_000.0),
        replayed,  # its first copy below is accepted; this second one must not be
    ]
    async with running(link), collecting(broker, link.topics.cmd_reply) as (client, got):
        await client.publish(link.topics.cmd, json.dumps(replayed), qos=1)
        await wait_until(lambda: len(got.messages) == 1, what="the first signed reply")
        for payload in hostile:
            await client.publish(link.topics.cmd, json.dumps(payload), qos=1)
        signed = ana.sign({"command": "select_job", "job": "LC-1", "request_id": "good"})
        await client.publish(link.topics.cmd, json.dumps(signed), qos=1)
        await client.publish(link.topics.cmd, json.dumps({"command": "ping"}), qos=1)
        await wait_until(lambda: len(got.messages) == 3 + len(hostile), what="every reply")
    store.close()
    replies = [Reply.model_validate_json(p) for p in got.payloads(link.topics.cmd_reply)]
    accepted = [r for r in replies if r.ok]
    assert [(r.command, r.operator) for r in accepted] == [
        ("rearm", "ana"), ("select_job", "ana"), ("ping", None)
    ]
    assert [(c.command, c.operator) for c in handler.commands] == [
        ("rearm", "ana"), ("select_job", "ana"), ("ping", None)
    ]
    refused = [r for r in replies if not r.ok]
    assert len(refused) == len(hostile)
    assert all(r.message.startswith("refused:") for r in refused)


async def test_signed_calibration_names_the_operator_in_its_record(
    broker: Broker, tmp_path: Path
) -> None:
    """The whole service: a signed zero over MQTT; the kept record says who did it."""
    keys = tmp_path / "operators"
    new_key_file(keys, "ana")
    root = f"heft-test-{uuid.uuid4().hex[:8]}"
    text = station_toml(
        port=str(tmp_path / "beam"), db=tmp_path / "heft.db", mqtt_port=broker.port,
        mqtt_root=root, calibrated=False, extra=f'[commands]\nkeys_file = "{keys}"\n',
    )
    config = parse_config(tomllib.loads(text))
    plan = placements(LARKSPUR_CLUBS[:1], start_s=60.0)  # the beam stays empty meanwhile
    pty = PtyDevice(beam_device(plan), link=tmp_path / "beam").start()
    service = Service(config)
    task = asyncio.create_task(service.run())
    topics = Topics(root, "bench-1")
    try:
        await asyncio.wait_for(service.ready.wait(), timeout=15)
        await wait_until(lambda: service.devices["beam"].connected, what="beam connected")
        await wait_until(
            lambda: service.mqtt_link is not None and service.mqtt_link.connected,
            what="station on the broker",
        )
        async with collecting(broker, topics.cmd_reply) as (client, got):
            zero = {"command": "calibrate_zero", "channel": "beam/0", "request_id": "z"}
            await client.publish(topics.cmd, json.dumps(zero), qos=1)  # unsigned: refused
            await client.publish(
                topics.cmd, json.dumps(Signer.from_file(keys).sign(zero)), qos=1
            )
            await wait_until(lambda: len(got.messages) == 2, timeout_s=30, what="two replies")
        assert service.store is not None
        records = service.store.calibrations("beam/0")
    finally:
        await stop_task(task, "Service.run")
        await asyncio.to_thread(pty.close)
    unsigned, signed = (Reply.model_validate_json(p) for p in got.payloads(topics.cmd_reply))
    assert not unsigned.ok and "sign" in unsigned.message
    assert signed.ok, signed.message
    assert signed.operator == "ana"
    assert signed.data["calibration"]["operator"] == "ana"
    assert [(r.kind, r.operator) for r in records] == [("zero", "ana")]


def test_dash_key_file_signs_as_its_operator(tmp_path: Path) -> None:
    key = tmp_path / "ana.key"
    new_key_file(key, "ana")
    url = "mqtt://127.0.0.1:1883"
    args = build_parser().parse_args(["dash", "--broker", url, "--commands", "--key-file",
                                      str(key)])
    source = dash.build_source(args)
    assert source.signer is not None and source.signer.operator == "ana"
    for argv in (["--key-file", str(key)], ["--commands", "--key-file", str(tmp_path)]):
        with pytest.raises(SystemExit):  # no --commands; a folder is no key file
            dash.build_source(build_parser().parse_args(["dash", "--broker", url, *argv]))


def test_config_names_the_keys_and_says_what_the_station_allows(
    tmp_path: Path, capsys: pytest.CaptureFixture[str], caplog: pytest.LogCaptureFixture
) -> None:
    keys = tmp_path / "operators"
    new_key_file(keys, "ana")
    config = tmp_path / "station.toml"
    text = example_toml("two_support")
    config.write_text(text.replace('# keys_file = "/etc/heft/operator-keys"',
                                   'keys_file = "operators"'))  # relative to the config
    assert main(["config", "check", str(config)]) == 0
    assert "commands signed (1 operator key(s))" in capsys.readouterr().out
    keys.chmod(0o640)
    assert main(["config", "check", str(config)]) == 2
    assert "commands.keys_file" in capsys.readouterr().err
    loaded = parse_config(tomllib.loads(config.read_text()))
    assert loaded.commands.keys_file == Path("operators")  # resolved only by load_config
    refused = authority_from_config(load_config(config).commands)  # readable by the group
    assert refused.check({"command": "rearm"}).refusal is not None
    assert "let others read" in caplog.text
    caplog.clear()
    open_bench = parse_config(tomllib.loads(text.replace("open_bench = false",
                                                          "open_bench = true")))
    assert authority_from_config(open_bench.commands).check({"command": "rearm"}).refusal is None
    assert any(r.levelname == "WARNING" and "open_bench" in r.getMessage()
               for r in caplog.records)


async def test_a_measurement_completed_by_a_signed_command_names_the_operator(
    tmp_path: Path,
) -> None:
    """The balance point entered by ana completes the club: the stored record says so."""
    config = qc2_config(tmp_path)
    service = Service(config)
    pipeline = BenchPipeline(config, lambda: T0)
    service._assemble(pipeline, Store(tmp_path / "heft.db"))  # fed below without ports
    for r in weighing("balance", 405.0, 1.0, 5.0, 4.0):
        pipeline.feed(r)
    verdict = CommandAuthority({"ana": KEY}).check(
        Signer("ana", KEY).sign({"command": "set_balance_point", "balance_point": "29.2in"})
    )
    assert verdict.operator == "ana"
    cmd = parse_command(verdict.command)
    assert not isinstance(cmd, Reply)
    reply = await service.handle_command(cmd.model_copy(update={"operator": verdict.operator}))
    assert reply.ok and reply.operator == "ana", reply.message
    assert service._to_store is not None
    m = service._to_store.get_nowait()
    assert m.operator == "ana" and m.balance_point_in == pytest.approx(29.2)
