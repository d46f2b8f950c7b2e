"""The wire codec: every message survives encode/decode unchanged, on the topic, QoS and retain
flag the topic table states; a bad payload raises an error naming the topic and the field."""

from __future__ import annotations

import json
from datetime import UTC, datetime

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from heft.daemon.command_api import Reply
from heft.daemon.events import (
    EVENT_TYPES,
    Alarm,
    AlarmChanged,
    AlarmKind,
    CaptureState,
    CaptureStateChanged,
    DeviceStatus,
    LiveReading,
    MeasurementCaptured,
    flag_names,
)
from heft.daemon.measurement import Verdict
from heft.daemon.mqtt_topics import TOPIC_SPECS, Topics, parse_topic
from heft.daemon.wire import ActiveAlarms, Outbound, StationStatus, WireCodec, WireError
from heft.drivers.reading import Flag
from tests.sample_records import make_alarm, make_measurement

ROOT = "larkspur/heft"
CODEC = WireCodec(ROOT)
NOW = datetime(2026, 11, 30, 9, 30, tzinfo=UTC)

# Names that are valid topic levels (no '/', '+', '#', NUL), as a station or device would use.
names = st.text(st.characters(codec="utf-8", exclude_characters="/+#\x00"), min_size=1, max_size=12)
finite = st.floats(allow_nan=False, allow_infinity=False, width=64)
times = st.datetimes(
    min_value=datetime(2000, 1, 1), max_value=datetime(2100, 1, 1), timezones=st.just(UTC)
)
flags = st.sets(st.sampled_from([f for f in Flag if f.value])).map(
    lambda fs: Flag(sum(f.value for f in fs))
)
alarms = st.builds(
    Alarm,
    station=names,
    kind=st.sampled_from(AlarmKind),
    source=names,
    active=st.booleans(),
    acknowledged=st.booleans(),
    message=st.text(max_size=40),
    time_utc=times,
)
live = st.builds(
    LiveReading,
    station=names,
    channel=st.builds(lambda d, i: f"{d}/{i}", names, st.integers(0, 7)),
    value_g=finite,
    flags=flags,
    t_mono_s=finite,
)
capture = st.builds(
    CaptureStateChanged,
    station=names,
    state=st.sampled_from(CaptureState),
    detail=st.text(max_size=40),
    t_mono_s=finite,
)
device = st.builds(
    DeviceStatus,
    station=names,
    device=names,
    connected=st.booleans(),
    port=st.text(max_size=20),
    sample_rate_hz=st.none() | finite,
    frame_errors=st.integers(0, 10**9),
    last_value=st.none() | finite,
    model=st.text(max_size=12),
    firmware=st.text(max_size=12),
    last_t_mono_s=st.none() | finite,
)
measured = st.builds(
    lambda seq, station, when, weight_g, bp_in, fail: MeasurementCaptured(
        measurement=make_measurement(
            seq,
            station=station,
            time_utc=when,
            total_weight_g=weight_g,
            balance_point_in=bp_in,
            verdict=Verdict.FAIL if fail else Verdict.PASS,
        )
    ),
    st.integers(1, 10**6),
    names,
    times,
    st.floats(380.0, 480.0),  # grams and inches of a golf club: swing weight stays in A0..G10
    st.floats(27.0, 30.0),
    st.booleans(),
)
events = {
    LiveReading: live,
    CaptureStateChanged: capture,
    DeviceStatus: device,
    AlarmChanged: st.builds(AlarmChanged, alarm=alarms),
    MeasurementCaptured: measured,
}
active_alarms = st.builds(
    lambda station, when, listed: ActiveAlarms(
        station=station,
        time_utc=when,
        active=tuple(a.model_copy(update={"station": station, "active": True}) for a in listed),
    ),
    names,
    times,
    st.lists(alarms, max_size=4),
)
messages = st.one_of(
    *events.values(),
    active_alarms,
    st.builds(StationStatus, station=names, online=st.booleans()),
)


def test_every_event_type_has_a_strategy() -> None:
    assert set(events) == set(EVENT_TYPES)


@settings(max_examples=300, deadline=None)
@given(messages)
def test_every_message_survives_the_round_trip(message: Outbound) -> None:
    out = CODEC.encode(message, now_utc=NOW)
    assert CODEC.decode(out.topic, out.payload) == message
    match = parse_topic(ROOT, out.topic)
    assert match is not None
    spec = next(s for s in TOPIC_SPECS if s.leaf.split("/<")[0] == match.kind)
    assert (out.qos, out.retain) == (spec.qos, spec.retain)


def test_encoded_payloads_keep_the_documented_keys() -> None:
    """The JSON keys a consumer reads (docs/mqtt.md); additions are fine, renames are not."""
    reading = LiveReading(
        station="bench-1", channel="beam/0", value_g=211.5, flags=Flag.MOTION, t_mono_s=3.25
    )
    out = CODEC.encode(reading, now_utc=NOW)
    assert out.topic == Topics(ROOT, "bench-1").live("beam/0")
    assert json.loads(out.payload) == {
        "station": "bench-1",
        "channel": "beam/0",
        "value_g": 211.5,
        "flags": ["motion"],
        "t_mono_s": 3.25,
        "time_utc": "2026-11-30T09:30:00Z",
    }
    alarm = make_alarm(AlarmKind.WILL_NOT_SETTLE, "station", True, NOW)
    out = CODEC.encode(AlarmChanged(alarm=alarm))
    assert json.loads(out.payload)["key"] == "will_not_settle:station"
    status = CODEC.encode(StationStatus(station="bench-1", online=False))
    assert (status.payload, status.retain) == (b"offline", True)
    last = CODEC.encode_last(make_measurement(3))
    assert last.topic == Topics(ROOT, "bench-1").measurement_last and last.retain


def test_flag_names() -> None:
    assert flag_names(Flag.NONE) == []
    assert flag_names(Flag.STABLE | Flag.NET) == ["net", "stable"]


def test_a_reply_decodes_and_other_topics_are_not_ours() -> None:
    t = Topics(ROOT, "bench-1")
    reply = Reply(ok=True, command="tare", request_id="r-1", message="tared")
    assert CODEC.decode(t.cmd_reply, reply.model_dump_json().encode()) == reply
    assert CODEC.decode("other/bench-1/measurement", b"{}") is None
    assert CODEC.decode(t.cmd, b'{"command": "tare"}') is None  # the station's input


def _live_payload(**changes: object) -> bytes:
    good = {
        "station": "bench-1",
        "channel": "beam/0",
        "value_g": 1.0,
        "flags": ["stable"],
        "t_mono_s": 1.0,
        "time_utc": "2026-11-30T09:30:00Z",
    }
    return json.dumps({**good, **changes}).encode()


@pytest.mark.parametrize(
    ("topic_leaf", "payload", "field"),
    [
        ("live/beam/0", _live_payload(value_g="heavy"), "value_g"),
        ("live/beam/0", _live_payload(flags=["stable", "wobbly"]), "flags"),
        ("live/beam/0", _live_payload(channel="beam"), "channel"),
        ("live/beam/0", _live_payload(station=""), "station"),
        ("capture", b'{"station": "bench-1", "state": "dozing", "t_mono_s": 1}', "state"),
        ("device/beam", b'{"station": "bench-1", "device": "beam", "port": "p"}', "connected"),
        (
            "alarm/event",
            json.dumps(
                {
                    **make_alarm(AlarmKind.OVERLOAD, "beam/0", True).model_dump(mode="json"),
                    "key": "overload:beam/1",
                }
            ).encode(),
            "key",
        ),
        ("alarms", b'{"station": "bench-1", "time_utc": "yesterday"}', "time_utc"),
        ("measurement", b"not json", "payload"),
    ],
)
def test_a_bad_payload_names_the_topic_and_field(
    topic_leaf: str, payload: bytes, field: str
) -> None:
    topic = f"{Topics(ROOT, 'bench-1').base}/{topic_leaf}"
    with pytest.raises(WireError) as caught:
        CODEC.decode(topic, payload)
    text = str(caught.value)
    assert text.startswith(f"{topic}: ")
    assert field in text, text


def test_a_newer_station_adding_a_field_is_still_read() -> None:
    message = CODEC.decode(f"{ROOT}/bench-1/live/beam/0", _live_payload(humidity_pct=40.0))
    assert isinstance(message, LiveReading) and message.value_g == 1.0


def test_events_are_keyword_only_and_validated() -> None:
    with pytest.raises(TypeError):
        LiveReading("bench-1", "beam/0", 1.0, 2.0, Flag.NONE)  # type: ignore[misc]
    with pytest.raises(ValueError, match="frame_errors"):
        DeviceStatus(station="b", device="d", connected=True, port="p", frame_errors=-1)
    with pytest.raises(ValueError, match="colour"):
        CaptureStateChanged(station="b", state=CaptureState.EMPTY, t_mono_s=0, colour="red")  # type: ignore[call-arg]
    alarm = make_alarm(AlarmKind.OVERLOAD, "beam/0", True)
    with pytest.raises(ValueError, match="frozen"):
        alarm.active = False  # type: ignore[misc]
