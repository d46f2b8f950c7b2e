"""Topic builders, topic parsing, discovery and the live-reading throttle (pure code)."""

from __future__ import annotations

import pytest

from heft.daemon.mqtt_state import LatestValueThrottle
from heft.daemon.mqtt_topics import (
    TopicError,
    TopicMatch,
    Topics,
    ha_discovery,
    ha_object_id,
    parse_topic,
)


def test_every_topic_lives_in_the_station_subtree() -> None:
    t = Topics("larkspur/heft", "bench-1")
    names = [
        t.status,
        t.measurement,
        t.measurement_last,
        t.live("beam/0"),
        t.capture,
        t.device("beam"),
        t.alarms,
        t.alarm_event,
        t.cmd,
        t.cmd_reply,
    ]
    assert all(n.startswith("larkspur/heft/bench-1/") for n in names)
    assert len(set(names)) == len(names)
    assert t.live("beam/0") == "larkspur/heft/bench-1/live/beam/0"
    assert t.subtree == "larkspur/heft/bench-1/#"
    assert Topics.all_stations("heft").measurement == "heft/+/measurement"


@pytest.mark.parametrize("bad", ["", "bench/1", "bench+", "bench#", "a\x00b"])
def test_bad_station_names_are_refused_naming_the_value(bad: str) -> None:
    with pytest.raises(TopicError, match="station"):
        Topics("heft", bad)


def test_bad_device_and_channel_names_are_refused() -> None:
    t = Topics("heft", "bench-1")
    with pytest.raises(TopicError, match="device 'be/am'"):
        t.device("be/am")
    with pytest.raises(TopicError, match="expected '<device>/<index>'"):
        t.live("beam")
    with pytest.raises(TopicError, match="channel part"):
        t.live("beam/#")
    with pytest.raises(TopicError, match="topic_root"):
        Topics("heft//x", "bench-1")


@pytest.mark.parametrize(
    ("topic", "match"),
    [
        ("heft/bench-1/status", TopicMatch("bench-1", "status")),
        ("heft/qc-1/measurement", TopicMatch("qc-1", "measurement")),
        ("heft/qc-1/last_measurement", TopicMatch("qc-1", "last_measurement")),
        ("heft/bench-1/live/beam/1", TopicMatch("bench-1", "live", "beam/1")),
        ("heft/bench-1/device/scale", TopicMatch("bench-1", "device", "scale")),
        ("heft/bench-1/alarm/event", TopicMatch("bench-1", "alarm/event")),
        ("heft/bench-1/cmd/reply", TopicMatch("bench-1", "cmd/reply")),
        ("heft/bench-1/live/beam", None),
        ("heft/bench-1/unknown", None),
        ("other/bench-1/status", None),
        ("heft/bench-1", None),
    ],
)
def test_parse_topic(topic: str, match: TopicMatch | None) -> None:
    assert parse_topic("heft", topic) == match


def test_parse_topic_round_trips_the_builders() -> None:
    t = Topics("plant/a", "qc-1")
    assert parse_topic("plant/a", t.live("scale/0")) == TopicMatch("qc-1", "live", "scale/0")
    assert parse_topic("plant/a", t.alarms) == TopicMatch("qc-1", "alarms")


def test_ha_discovery_is_device_based_and_names_heft_topics() -> None:
    assert ha_object_id("bench 1.a") == "heft_bench_1_a"
    t = Topics("heft", "bench-1")
    topic, cfg = ha_discovery(t, "homeassistant", "0.1.0")
    assert topic == "homeassistant/device/heft_bench-1/config"
    assert cfg["o"] == {"name": "heft", "sw": "0.1.0"}
    cmps = cfg["cmps"]
    assert isinstance(cmps, dict)
    assert cmps["alarm"]["state_topic"] == t.alarms
    assert cmps["capture_state"]["state_topic"] == t.capture
    ids = [c["unique_id"] for c in cmps.values()]
    assert len(ids) == len(set(ids))


class TestLatestValueThrottle:
    def test_first_value_due_at_once_then_rate_limited(self) -> None:
        th: LatestValueThrottle[str, int] = LatestValueThrottle(0.5)
        th.offer("a", 1)
        assert th.take_due(10.0) == [("a", 1)]
        th.offer("a", 2)
        th.offer("a", 3)  # replaces 2: only the newest value matters
        assert th.take_due(10.2) == []
        assert th.next_due() == pytest.approx(10.5)
        assert th.take_due(10.5) == [("a", 3)]
        assert th.next_due() is None

    def test_keys_are_independent(self) -> None:
        th: LatestValueThrottle[str, int] = LatestValueThrottle(1.0)
        th.offer("a", 1)
        assert th.take_due(0.0) == [("a", 1)]
        th.offer("b", 7)
        th.offer("a", 2)
        assert th.take_due(0.1) == [("b", 7)]
        assert th.next_due() == pytest.approx(1.0)

    def test_rate_bound_over_a_long_stream(self) -> None:
        th: LatestValueThrottle[str, int] = LatestValueThrottle(0.2)  # 5 per second
        sent = []
        for i in range(1000):  # 100 Hz for 10 s
            now = i * 0.01
            th.offer("beam/0", i)
            sent += th.take_due(now)
        assert 49 <= len(sent) <= 51
        assert sent[0] == ("beam/0", 0)

    def test_clear_drops_pending(self) -> None:
        th: LatestValueThrottle[str, int] = LatestValueThrottle(1.0)
        th.offer("a", 1)
        th.clear()
        assert th.take_due(5.0) == []
