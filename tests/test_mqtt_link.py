"""MqttLink against a real Mosquitto broker: measurements, retained state, live data, commands."""

from __future__ import annotations

import asyncio
import json
from collections.abc import Iterator
from pathlib import Path

import aiomqtt
import pytest
from paho.mqtt.packettypes import PacketTypes
from paho.mqtt.properties import Properties

from heft.daemon.command_api import Command, Reply
from heft.daemon.command_auth import CommandAuthority
from heft.daemon.events import (
    AlarmChanged,
    AlarmKind,
    CaptureState,
    CaptureStateChanged,
    DeviceStatus,
    EventBus,
    LiveReading,
    MeasurementCaptured,
)
from heft.daemon.measurement import Measurement
from heft.daemon.mqtt_link import MqttLink
from heft.daemon.storage import Store
from heft.daemon.wire import AlarmPayload, AlarmsPayload, LiveReadingPayload
from heft.drivers.reading import Flag
from tests.mqtt_broker import Broker
from tests.mqtt_helpers import (
    Collector,
    RecordingHandler,
    collecting,
    running,
    settings_for,
    stop_task,
    wait_until,
)
from tests.sample_records import make_alarm, make_measurement

OPEN = CommandAuthority.open()  # these tests are about the link; signing has its own file


@pytest.fixture
def store(tmp_path: Path) -> Iterator[Store]:
    s = Store(tmp_path / "link.db")
    yield s
    s.close()


def _measurements(payloads: list[bytes]) -> list[Measurement]:
    return [Measurement.model_validate_json(p) for p in payloads]


async def test_stored_measurement_is_published_at_qos1_and_marked_sent(
    broker: Broker, store: Store
) -> None:
    bus = EventBus()
    link = MqttLink(settings_for(broker), "bench-1", store, bus)
    t = link.topics
    async with collecting(broker, t.measurement, t.measurement_last) as (_, got), running(link):
        m = make_measurement(1)
        store.add_measurement(m)
        bus.publish(MeasurementCaptured(measurement=m))  # what the service does after storing
        await wait_until(lambda: len(got.on(t.measurement)) == 1, what="the measurement")
        await wait_until(lambda: store.outbox_count() == 0, what="outbox row marked sent")
        msg = got.on(t.measurement)[0]
        assert msg.qos == 1
        assert not msg.retain
        assert Measurement.model_validate_json(msg.payload) == m  # type: ignore[arg-type]
        assert json.loads(msg.payload)["id"] == str(m.id)  # type: ignore[arg-type]
        await wait_until(lambda: bool(got.on(t.measurement_last)), what="last measurement")
    # The retained copy of the newest measurement is there for a late subscriber.
    async with collecting(broker, t.measurement_last) as (_, late):
        await wait_until(lambda: bool(late.messages), what="retained last measurement")
        assert late.messages[0].retain
        assert _measurements(late.payloads(t.measurement_last)) == [m]


async def test_backlog_stored_before_start_goes_out_in_order(broker: Broker, store: Store) -> None:
    ms = [make_measurement(i) for i in range(1, 21)]
    for m in ms:
        store.add_measurement(m)
    link = MqttLink(settings_for(broker), "bench-1", store, EventBus())
    async with collecting(broker, link.topics.measurement) as (_, got), running(link):
        await wait_until(lambda: len(got.messages) == 20, what="20 measurements")
        await wait_until(lambda: store.outbox_count() == 0, what="outbox drained")
    assert _measurements(got.payloads(link.topics.measurement)) == ms


async def test_availability_retained_online_then_offline_on_orderly_stop(
    broker: Broker, store: Store
) -> None:
    link = MqttLink(settings_for(broker), "bench-1", store, EventBus())
    async with running(link), collecting(broker, link.topics.status) as (_, got):
        await wait_until(lambda: bool(got.messages), what="retained status")
        assert got.messages[0].retain
        assert got.payloads(link.topics.status) == [b"online"]
    async with collecting(broker, link.topics.status) as (_, after):
        await wait_until(lambda: bool(after.messages), what="retained status after stop")
        assert after.payloads(link.topics.status) == [b"offline"]


async def test_alarms_capture_and_device_state_are_retained(broker: Broker, store: Store) -> None:
    bus = EventBus()
    link = MqttLink(settings_for(broker), "bench-1", store, bus)
    t = link.topics
    filters = (t.alarms, t.capture, t.device_all)

    def alarm_keys(got: Collector) -> list[str]:
        last = got.payloads(t.alarms)
        return [a.key for a in AlarmsPayload.model_validate_json(last[-1]).active] if last else []

    async with running(link):
        async with collecting(broker, *filters) as (_, live):
            bus.publish(AlarmChanged(alarm=make_alarm(AlarmKind.DEVICE_OFFLINE, "beam", True)))
            bus.publish(AlarmChanged(alarm=make_alarm(AlarmKind.OVERLOAD, "beam/0", True)))
            bus.publish(AlarmChanged(alarm=make_alarm(AlarmKind.OVERLOAD, "beam/0", False)))
            bus.publish(CaptureStateChanged(
                station="bench-1", state=CaptureState.SETTLING, t_mono_s=12.5, detail="placed"
            ))
            bus.publish(DeviceStatus(
                station="bench-1", device="beam", connected=True, port="/dev/ttyUSB0",
                sample_rate_hz=80.0,
            ))
            await wait_until(lambda: alarm_keys(live) == ["device_offline:beam"], what="alarms")
            await wait_until(lambda: bool(live.on(t.capture)), what="capture state")
            await wait_until(lambda: bool(live.on(t.device("beam"))), what="device status")
        # A late subscriber gets the current state from the broker's retained copies.
        async with collecting(broker, *filters) as (_, late):
            await wait_until(lambda: len(late.messages) == 3, what="three retained messages")
            assert all(m.retain for m in late.messages)
            assert alarm_keys(late) == ["device_offline:beam"]
            capture = json.loads(late.payloads(t.capture)[0])
            assert (capture["state"], capture["detail"]) == ("settling", "placed")
            device = json.loads(late.payloads(t.device("beam"))[0])
            assert device["connected"] is True
            assert device["sample_rate_hz"] == 80.0


async def test_alarm_events_stream_every_change(broker: Broker, store: Store) -> None:
    bus = EventBus()
    link = MqttLink(settings_for(broker), "bench-1", store, bus)
    async with collecting(broker, link.topics.alarm_event) as (_, got), running(link):
        bus.publish(AlarmChanged(alarm=make_alarm(AlarmKind.OVERLOAD, "beam/0", True)))
        bus.publish(AlarmChanged(alarm=make_alarm(AlarmKind.OVERLOAD, "beam/0", False)))
        await wait_until(lambda: len(got.messages) == 2, what="two alarm events")
    events = [AlarmPayload.model_validate_json(p) for p in got.payloads(link.topics.alarm_event)]
    assert [(e.key, e.active) for e in events] == [
        ("overload:beam/0", True),
        ("overload:beam/0", False),
    ]


async def test_active_alarms_restored_from_the_database(broker: Broker, store: Store) -> None:
    store.record_alarm(make_alarm(AlarmKind.CALIBRATION_OVERDUE, "beam/1", True))
    link = MqttLink(settings_for(broker), "bench-1", store, EventBus())
    async with running(link), collecting(broker, link.topics.alarms) as (_, got):
        await wait_until(lambda: bool(got.messages), what="retained alarm list")
        alarms = AlarmsPayload.model_validate_json(got.payloads(link.topics.alarms)[-1])
        assert [a.key for a in alarms.active] == ["calibration_overdue:beam/1"]


async def test_live_readings_throttled_per_channel_qos0_not_retained(
    broker: Broker, store: Store
) -> None:
    bus = EventBus()
    link = MqttLink(settings_for(broker, live_max_rate_hz=2.0), "bench-1", store, bus)
    t = link.topics
    async with running(link), collecting(broker, t.live_all) as (_, got):
        # 200 readings per channel as fast as the loop allows: far above 2 Hz.
        for i in range(200):
            for ch in ("beam/0", "beam/1"):
                bus.publish(LiveReading(
                    station="bench-1", channel=ch, t_mono_s=i * 0.001,
                    value_g=100.0 + i, flags=Flag.STABLE,
                ))
            if i % 20 == 0:
                await asyncio.sleep(0)
        # The newest value of each channel always gets out (trailing edge of the throttle).
        for ch in ("beam/0", "beam/1"):
            await wait_until(
                lambda ch=ch: any(
                    LiveReadingPayload.model_validate_json(p).value_g == 299.0
                    for p in got.payloads(t.live(ch))
                ),
                what=f"last reading of {ch}",
            )
    for ch in ("beam/0", "beam/1"):
        msgs = got.on(t.live(ch))
        # Rate bound: values within one burst collapse into a handful of messages, not 200.
        assert 1 <= len(msgs) <= 5, len(msgs)
        assert all(m.qos == 0 and not m.retain for m in msgs)
        first = LiveReadingPayload.model_validate_json(msgs[0].payload)  # type: ignore[arg-type]
        assert first.channel == ch
        assert first.flags == Flag.STABLE


async def test_command_round_trip_mqtt5_response_topic_and_correlation(
    broker: Broker, store: Store
) -> None:
    handler = RecordingHandler()
    link = MqttLink(settings_for(broker), "bench-1", store, EventBus(), handler, authority=OPEN)
    response_topic = f"{link.topics.cmd_reply}/qc-tablet"
    async with running(link), collecting(broker, response_topic) as (client, got):
        props = Properties(PacketTypes.PUBLISH)
        props.ResponseTopic = response_topic
        props.CorrelationData = b"\x01corr-42"
        await client.publish(
            link.topics.cmd,
            json.dumps({"command": "select_job", "job": "LC-2417"}),
            qos=1,
            properties=props,
        )
        await wait_until(lambda: bool(got.messages), what="the v5 reply")
    reply_msg = got.messages[0]
    assert reply_msg.properties is not None
    assert reply_msg.properties.CorrelationData == b"\x01corr-42"
    reply = Reply.model_validate_json(reply_msg.payload)  # type: ignore[arg-type]
    assert reply.ok
    assert reply.command == "select_job"
    assert reply.data == {"seen": 1}
    assert [c.command for c in handler.commands] == ["select_job"]


async def test_command_round_trip_mqtt311_request_id_on_reply_topic(
    broker: Broker, store: Store
) -> None:
    handler = RecordingHandler()
    link = MqttLink(settings_for(broker), "bench-1", store, EventBus(), handler, authority=OPEN)
    async with (
        running(link),
        collecting(broker, link.topics.cmd_reply, protocol=aiomqtt.ProtocolVersion.V311) as (
            client,
            got,
        ),
    ):
        await client.publish(
            link.topics.cmd, json.dumps({"command": "tare", "request_id": "r-7"}), qos=1
        )
        await wait_until(lambda: bool(got.messages), what="the 3.1.1 reply")
    reply = Reply.model_validate_json(got.payloads(link.topics.cmd_reply)[0])
    assert (reply.ok, reply.command, reply.request_id) == (True, "tare", "r-7")
    assert handler.commands[0].command == "tare"


@pytest.mark.parametrize(
    ("payload", "names"),
    [
        (
            {"command": "calibrate_span", "channel": "beam/0", "mass_g": -5, "request_id": "b1"},
            "mass_g",
        ),
        ({"command": "select_job", "request_id": "b1"}, "job"),
        ({"command": "tare", "colour": "red", "request_id": "b1"}, "colour"),
        ({"command": "explode", "request_id": "b1"}, "command"),
    ],
)
async def test_bad_command_refused_naming_the_field(
    broker: Broker, store: Store, payload: dict[str, object], names: str
) -> None:
    handler = RecordingHandler()
    link = MqttLink(settings_for(broker), "bench-1", store, EventBus(), handler, authority=OPEN)
    async with running(link), collecting(broker, link.topics.cmd_reply) as (client, got):
        await client.publish(link.topics.cmd, json.dumps(payload), qos=1)
        await client.publish(link.topics.cmd, b"\xff not json", qos=1)
        await wait_until(lambda: len(got.messages) == 2, what="two refusals")
    bad, garbage = (Reply.model_validate_json(p) for p in got.payloads(link.topics.cmd_reply))
    assert not bad.ok
    assert names in bad.message
    assert bad.request_id == "b1"
    assert not garbage.ok
    assert "JSON" in garbage.message
    assert handler.commands == []  # nothing invalid reached the service


async def test_commands_disabled_are_refused(broker: Broker, store: Store) -> None:
    handler = RecordingHandler()
    settings = settings_for(broker, commands_enabled=False)
    link = MqttLink(settings, "bench-1", store, EventBus(), handler, authority=OPEN)
    async with running(link), collecting(broker, link.topics.cmd_reply) as (client, got):
        await client.publish(link.topics.cmd, json.dumps({"command": "rearm"}), qos=1)
        await wait_until(lambda: bool(got.messages), what="the refusal")
    reply = Reply.model_validate_json(got.payloads(link.topics.cmd_reply)[0])
    assert not reply.ok
    assert "commands_enabled" in reply.message
    assert handler.commands == []


async def test_failing_handler_gives_an_error_reply_and_the_link_stays_up(
    broker: Broker, store: Store
) -> None:
    async def broken(command: Command) -> Reply:
        raise RuntimeError("scale did not answer")

    link = MqttLink(settings_for(broker), "bench-1", store, EventBus(), broken, authority=OPEN)
    async with running(link), collecting(broker, link.topics.cmd_reply) as (client, got):
        for rid in ("a", "b"):
            await client.publish(
                link.topics.cmd, json.dumps({"command": "zero", "request_id": rid}), qos=1
            )
        await wait_until(lambda: len(got.messages) == 2, what="two error replies")
    replies = [Reply.model_validate_json(p) for p in got.payloads(link.topics.cmd_reply)]
    assert [(r.ok, r.request_id) for r in replies] == [(False, "a"), (False, "b")]
    assert "scale did not answer" in replies[0].message


async def test_home_assistant_discovery_sent_and_resent_on_ha_birth(
    broker: Broker, store: Store
) -> None:
    settings = settings_for(broker, homeassistant_discovery=True, homeassistant_prefix="ha-test")
    link = MqttLink(settings, "bench-1", store, EventBus())
    async with running(link), collecting(broker, "ha-test/device/+/config") as (client, got):
        await wait_until(lambda: len(got.messages) == 1, what="retained discovery")
        await client.publish("ha-test/status", b"online", qos=1)
        await wait_until(lambda: len(got.messages) == 2, what="discovery re-sent")
    topic = str(got.messages[0].topic)
    assert topic == "ha-test/device/heft_bench-1/config"
    cfg = json.loads(got.messages[1].payload)  # type: ignore[arg-type]
    assert cfg["availability"][0]["topic"] == link.topics.status
    assert cfg["cmps"]["total_weight"]["state_topic"] == link.topics.measurement_last
    assert cfg["cmps"]["total_weight"]["unit_of_measurement"] == "g"
    assert {c["unique_id"] for c in cfg["cmps"].values()} >= {"heft_bench-1_swingweight"}


def test_client_id_is_stable_and_per_station(tmp_path: Path) -> None:
    with Store(tmp_path / "ids.db") as store:
        bus = EventBus()
        from heft.daemon.mqtt_settings import MqttSettings

        a = MqttLink(MqttSettings(), "bench-1", store, bus)
        b = MqttLink(MqttSettings(), "qc-1", store, bus)
        c = MqttLink(MqttSettings(client_id="plant-7-bench-1"), "bench-1", store, bus)
        assert (a.client_id, b.client_id, c.client_id) == (
            "heft-bench-1",
            "heft-qc-1",
            "plant-7-bench-1",
        )
        assert a.client_id == MqttLink(MqttSettings(), "bench-1", store, bus).client_id


@pytest.mark.parametrize(("session_s", "backs_off"), [(2.0, True), (60.0, False)])
async def test_a_short_session_counts_as_a_failed_attempt(
    broker: Broker, store: Store, session_s: float, backs_off: bool
) -> None:
    """A broker that accepts and soon drops the link (or a second client with the same id)
    must meet growing delays, not an instant reconnect loop; a long session reconnects at once.
    """
    now = 0.0
    link = MqttLink(settings_for(broker), "bench-1", store, EventBus(), clock=lambda: now)
    session = asyncio.create_task(link._connect_and_serve())
    try:
        await asyncio.wait_for(link.wait_connected(), timeout=15)
        now += session_s  # the injected clock says how long the session lasted
        broker.stop()
        if backs_off:
            with pytest.raises(aiomqtt.MqttError, match=r"dropped after 2\.0 s"):
                await asyncio.wait_for(session, timeout=15)
        else:
            assert await asyncio.wait_for(session, timeout=15) is None
    finally:
        await stop_task(session, "MqttLink._connect_and_serve", reraise=False)


async def test_an_unexpected_error_in_a_session_is_logged_and_the_link_recovers(
    broker: Broker, store: Store, caplog: pytest.LogCaptureFixture
) -> None:
    bus = EventBus()
    link = MqttLink(settings_for(broker), "bench-1", store, bus, retry_initial_s=0.1)
    real = link._publish_state
    calls = 0

    async def broken_once(client: aiomqtt.Client) -> None:
        nonlocal calls
        calls += 1
        if calls == 1:
            raise ValueError("injected fault")
        await real(client)

    link._publish_state = broken_once  # type: ignore[method-assign]
    async with collecting(broker, link.topics.measurement) as (_, got):
        task = asyncio.create_task(link.run())
        try:
            await wait_until(lambda: calls >= 2 and link.connected, what="second session")
            m = make_measurement(1)
            store.add_measurement(m)
            bus.publish(MeasurementCaptured(measurement=m))
            await wait_until(lambda: bool(got.messages), what="measurement after the fault")
        finally:
            await stop_task(task, "MqttLink.run", reraise=False)
    assert any("injected fault" in (r.exc_text or "") or r.exc_info for r in caplog.records)
