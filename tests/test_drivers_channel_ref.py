"""ChannelRef: a channel's "<device>/<index>" text read once, and the config fields holding one."""

from __future__ import annotations

import tomllib
from pathlib import Path

import pytest

from heft.daemon.config import ConfigError, TwoSupportGeometry, load_config_text
from heft.drivers.reading import ChannelRef, ChannelRefError, Flag, Reading, ValueKind
from tests.service_bench import station_config, station_toml


def test_parse_gives_the_device_and_index_and_str_gives_the_text_back() -> None:
    ref = ChannelRef.parse("beam/1")
    assert (ref.device, ref.index) == ("beam", 1)
    assert str(ref) == "beam/1"
    for text in ("scale/0", "qc-1.lever_2/15", "B/0"):
        assert str(ChannelRef.parse(text)) == text
    assert ChannelRef.parse("beam/1") == ChannelRef("beam", 1)
    assert len({ChannelRef.parse("beam/1"), ChannelRef("beam", 1)}) == 1  # a value: hashable


def test_a_reading_names_its_channel() -> None:
    r = Reading("beam", 1, 0.0, 8453.0, ValueKind.COUNTS, "counts", Flag.NONE, b"")
    assert r.ref == ChannelRef("beam", 1) and str(r.ref) == "beam/1"


@pytest.mark.parametrize(
    "text",
    ["beam", "beam/", "/0", "beam/x", "beam/-1", "beam/01", "beam/0/1", "be am/0", "-beam/0", ""],
)
def test_bad_forms_are_refused_naming_the_text_and_the_form(text: str) -> None:
    with pytest.raises(ChannelRefError) as caught:
        ChannelRef.parse(text)
    assert str(caught.value).startswith(f"{text!r} is not a channel reference")
    assert "expected '<device>/<index>'" in str(caught.value)


def test_the_value_itself_cannot_be_made_wrong() -> None:
    with pytest.raises(ChannelRefError, match="negative"):
        ChannelRef("beam", -1)
    with pytest.raises(ChannelRefError, match="device name 'be/am'"):
        ChannelRef("be/am", 0)
    ref = ChannelRef("beam", 0)
    with pytest.raises(AttributeError):
        ref.index = 2  # type: ignore[misc]


def test_config_channel_fields_hold_channel_refs_and_keep_their_text() -> None:
    config = station_config(port="/dev/null", db=Path("x.db"))
    geometry = config.geometry
    assert isinstance(geometry, TwoSupportGeometry)
    assert geometry.channel_a == ChannelRef("beam", 0)
    assert geometry.channels == ("beam/0", "beam/1")
    assert geometry.model_dump()["channel_b"] == "beam/1"  # written back as the same text


def test_a_bad_channel_text_in_the_config_names_the_field() -> None:
    text = station_toml(port="/dev/null", db=Path("x.db")).replace(
        'channel_b = "beam/1"', 'channel_b = "beam:1"'
    )
    tomllib.loads(text)  # still valid TOML: the config check must catch it
    with pytest.raises(ConfigError) as caught:
        load_config_text(text, "station.toml", Path())
    assert "geometry.channel_b: 'beam:1' is not a channel reference; expected '<device>/<index>'" \
        in str(caught.value)


def test_a_bad_channel_table_name_names_the_table() -> None:
    text = station_toml(port="/dev/null", db=Path("x.db")).replace(
        '[channels."beam/1"]', '[channels."beam/one"]'
    )
    with pytest.raises(ConfigError, match=r"channels.*'beam/one' is not a channel reference"):
        load_config_text(text, "station.toml", Path())


def test_a_bad_per_channel_capture_key_names_the_table() -> None:
    text = station_toml(port="/dev/null", db=Path("x.db"), capture=(
        'preset_name = "hx711_80hz"\n[capture.per_channel."beam-0"]\ndivision_g = 0.5'
    ))
    with pytest.raises(ConfigError, match=r"capture\.per_channel: 'beam-0' is not a channel ref"):
        load_config_text(text, "station.toml", Path())
