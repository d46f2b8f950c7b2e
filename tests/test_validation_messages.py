"""One wording for bad input: ``heft.drivers.validation.problem_lines`` and every place using it.

The helper is checked directly on small models; then each call site gets one bad input and must
name the field (path as written in the input) and say what was expected.
"""

from __future__ import annotations

import json
import tomllib
from pathlib import Path
from typing import Annotated, Literal

import pytest
from pydantic import BaseModel, ConfigDict, Field, ValidationError, model_validator

from heft.daemon.command_api import Reply, parse_command
from heft.daemon.config import ConfigError, parse_config
from heft.daemon.config_example import example_toml
from heft.drivers.base import DriverConfigError
from heft.drivers.fake_usb import FixtureError, load_device_definition
from heft.drivers.recording import RecordingError, parse_recording
from heft.drivers.registry import create_driver
from heft.drivers.sim.definitions import DefinitionError, parse_definition
from heft.drivers.transport import SerialTransport
from heft.drivers.usb_transport import open_usb_transport
from heft.drivers.validation import FieldProblems, problem_lines

FIXTURES = Path(__file__).resolve().parent.parent / "hardware_fixtures" / "usb"


# --- the helper, on small models ----------------------------------------------------------------


class _Strict(BaseModel):
    model_config = ConfigDict(extra="forbid")


class _Pair(_Strict):
    kind: Literal["pair"]
    left_g: float = Field(gt=0)
    right_g: float = 0.0


class _Single(_Strict):
    kind: Literal["single"]
    mass_g: float


class _Bench(_Strict):
    name: str
    parts: list[_Pair] = []
    layout: Annotated[_Pair | _Single, Field(discriminator="kind")]
    position: float | str = 0.0


def _lines(data: object, **kwargs: object) -> list[str]:
    with pytest.raises(ValidationError) as err:
        _Bench.model_validate(data)
    return problem_lines(err.value, _Bench, **kwargs)  # type: ignore[arg-type]


GOOD_LAYOUT = {"kind": "pair", "left_g": 1.0}


def test_path_expected_and_got() -> None:
    assert _lines({"name": "a", "layout": {"kind": "pair", "left_g": -2}}) == [
        "layout.left_g: Input should be greater than 0 (got -2)"  # the tag 'pair' is left out
    ]


def test_list_index_is_written_in_brackets() -> None:
    data = {"name": "a", "layout": GOOD_LAYOUT, "parts": [GOOD_LAYOUT, {"kind": "pair"}]}
    assert _lines(data) == ["parts[1].left_g: is required"]


def test_unknown_key_comes_first_with_the_nearest_name() -> None:
    assert _lines({"nmae": "a", "layout": GOOD_LAYOUT}) == [
        "nmae: unknown field; did you mean 'name'?",
        "name: is required",
    ]


def test_unknown_key_without_a_near_name_lists_the_valid_ones() -> None:
    lines = _lines({"name": "a", "layout": {"kind": "single", "mass_g": 1, "zz": 1}}, noun="option")
    assert lines == ["layout.zz: unknown option; expected one of kind, mass_g"]


def test_tagged_union_tag_names_the_choices_and_what_was_given() -> None:
    assert _lines({"name": "a", "layout": {"kind": "triple"}}) == [
        "layout: 'kind' must be one of pair, single (got 'triple')"
    ]


def test_show_tags_keeps_the_tag_in_the_path() -> None:
    lines = _lines({"name": "a", "layout": {"kind": "single"}}, show_tags=True)
    assert lines == ["layout.single.mass_g: is required"]


def test_plain_union_member_labels_are_not_keys() -> None:
    lines = _lines({"name": "a", "layout": GOOD_LAYOUT, "position": [1]}, first_only=True)
    assert lines == ["position: Input should be a valid number"]  # a list: no "(got ...)"


def test_first_only_and_top_label() -> None:
    with pytest.raises(ValidationError) as err:
        _Bench.model_validate_json("not json")
    assert problem_lines(err.value, _Bench, top="payload", first_only=True) == [
        "payload: Invalid JSON: expected ident at line 1 column 2"
    ]


def test_a_long_input_is_cut() -> None:
    (line,) = _lines({"name": "a", "layout": {"kind": "single", "mass_g": "x" * 200}})
    assert line.startswith("layout.mass_g: Input should be a valid number")
    got = line[line.index("(got ") + len("(got ") : -1]
    assert got == repr("x" * 200)[:57] + "..."  # 60 characters in all


def test_cross_field_problems_keep_their_own_paths() -> None:
    class Checked(BaseModel):
        low_g: float
        high_g: float

        @model_validator(mode="after")
        def _ordered(self) -> Checked:
            if self.low_g > self.high_g:
                raise FieldProblems([("low_g", "must not exceed high_g"), ("high_g", "too low")])
            return self

    with pytest.raises(ValidationError) as err:
        Checked(low_g=2, high_g=1)
    assert problem_lines(err.value, Checked) == ["low_g: must not exceed high_g", "high_g: too low"]


# --- every call site names the field --------------------------------------------------------------


def test_station_config() -> None:
    text = example_toml("two_support").replace('channel_b = "beam/1"', 'chanel_b = "beam/1"')
    with pytest.raises(ConfigError, match=r"^geometry\.chanel_b: unknown field; did you mean"):
        parse_config(tomllib.loads(text))


def test_station_config_serial_settings() -> None:
    text = example_toml("two_support").replace(
        "baudrate = 115200", 'baudrate = 9600\nserial = { stopbits = 3 }'
    )
    with pytest.raises(ConfigError, match=r"^devices\[0\]\.serial\.stopbits: stopbits must be 1, "
                                          r"1\.5 or 2 \(got 3\)"):
        parse_config(tomllib.loads(text))


def test_driver_options() -> None:
    with pytest.raises(DriverConfigError, match=r"'qc-1' .*: mod: unknown option; did you mean "
                                                r"'mode'\?"):
        create_driver("poll_balance", "qc-1", {"mod": "poll"})


def test_serial_transport_settings() -> None:
    with pytest.raises(DriverConfigError, match=r"'/dev/ttyS9': bytesize: .* \(got 9\)"):
        SerialTransport("/dev/ttyS9", bytesize=9)


def test_recording_lines() -> None:
    header = json.dumps({"format": "heft-recording", "version": 1, "device": "d", "driver": "b"})
    with pytest.raises(RecordingError, match=r"^x\.jsonl:2: t: Input should be greater than or "
                                             r"equal to 0 \(got -1\)"):
        parse_recording([header, '{"t": -1, "device": "d", "rx": "a"}'], "x.jsonl")


def test_usb_fixture_files(tmp_path: Path) -> None:
    raw = json.loads((FIXTURES / "devices" / "fernbrake-ps5.json").read_text())
    raw["device"]["bMaxPacketSize0"] = "eight"
    path = tmp_path / "bad.json"
    path.write_text(json.dumps(raw))
    with pytest.raises(FixtureError, match=r"bad\.json: device\.bMaxPacketSize0: .*'eight'"):
        load_device_definition(path)


def test_simulator_definitions() -> None:
    with pytest.raises(DefinitionError, match=r"<x>: field rate_hz: Input should be greater than "
                                              r"0 \(got -1\)"):
        parse_definition({"spec": 1, "protocol": "stream_balance", "name": "x", "rate_hz": -1,
                          "capacity_g": 100}, source="<x>")


def test_usb_port_options() -> None:
    with pytest.raises(DriverConfigError, match=r"read_timeout_ms: Input should be greater than "
                                                r"or equal to 10 \(got 1\)"):
        open_usb_transport("usb-hid://1209:0001", {"read_timeout_ms": 1})


def test_mqtt_commands() -> None:
    reply = parse_command(json.dumps({"command": "calibrate_span", "channel": "beam/0",
                                      "mass_g": -5}))
    assert isinstance(reply, Reply)
    assert reply.message == (
        "bad command: calibrate_span.mass_g: Input should be greater than 0 (got -5)"
    )
    unknown = parse_command(json.dumps({"command": "tare", "devcie": "beam"}))
    assert isinstance(unknown, Reply)
    assert unknown.message == "bad command: tare.devcie: unknown field; did you mean 'device'?"
    assert not isinstance(parse_command('{"command": "tare"}'), Reply)
