"""The MQTT reference: schemas are valid JSON Schema, examples and real payloads conform, the doc
is current."""

from __future__ import annotations

import argparse
import json
from pathlib import Path

import pytest
from jsonschema import Draft202012Validator

from heft.daemon.command_api import Reply, Tare
from heft.daemon.events import AlarmChanged, AlarmKind
from heft.daemon.mqtt_topics import TOPIC_SPECS, Topics
from heft.daemon.wire import WireCodec
from heft.tui.commands import schema as schema_cmd
from tests.sample_records import make_alarm, make_measurement

DOC = Path(__file__).resolve().parents[1] / "docs" / "mqtt.md"


def heft_schema(*argv: str) -> int:
    parser = argparse.ArgumentParser(prog="heft")
    schema_cmd.register(parser.add_subparsers(dest="command", required=True))
    args = parser.parse_args(["schema", *argv])
    result: int = args.func(args)
    return result


@pytest.mark.parametrize("name", sorted(schema_cmd.PAYLOADS))
def test_schema_is_valid_and_example_conforms(name: str) -> None:
    schema = schema_cmd.json_schema(name)
    Draft202012Validator.check_schema(schema)  # JSON Schema 2020-12 meta-schema
    Draft202012Validator(schema).validate(schema_cmd.example(name))


@pytest.mark.parametrize(
    ("name", "payload"),
    [
        ("measurement", make_measurement(7).model_dump(mode="json")),
        (
            "alarm",
            json.loads(
                WireCodec("heft")
                .encode(AlarmChanged(alarm=make_alarm(AlarmKind.OVERLOAD, "beam/0", True)))
                .payload
            ),
        ),
        ("command", Tare(command="tare", request_id="r1").model_dump(mode="json")),
        ("reply", Reply(ok=False, message="bad command: tare.device").model_dump(mode="json")),
        ("availability", "offline"),
    ],
)
def test_real_payloads_conform(name: str, payload: object) -> None:
    Draft202012Validator(schema_cmd.json_schema(name)).validate(payload)


@pytest.mark.parametrize(
    ("name", "payload"),
    [
        ("measurement", {**make_measurement(7).model_dump(mode="json"), "total_weight_g": "heavy"}),
        ("command", {"command": "tare", "colour": "red"}),
        ("command", {"command": "calibrate_span", "channel": "beam/0", "mass_g": 0}),
        ("availability", "maybe"),
    ],
)
def test_schemas_reject_bad_payloads(name: str, payload: object) -> None:
    assert list(Draft202012Validator(schema_cmd.json_schema(name)).iter_errors(payload))


def test_doc_generated_section_is_current() -> None:
    text = DOC.read_text(encoding="utf-8")
    start = text.index(schema_cmd.BEGIN_MARK)
    end = text.index(schema_cmd.END_MARK) + len(schema_cmd.END_MARK) + 1
    assert text[start:end] == schema_cmd.markdown(), (
        "docs/mqtt.md is stale: run `heft schema --update-doc docs/mqtt.md`"
    )


def test_readme_topic_reference_is_current() -> None:
    text = (DOC.parent.parent / "README.md").read_text(encoding="utf-8")
    start = text.index(schema_cmd.README_BEGIN_MARK)
    end = text.index(schema_cmd.README_END_MARK) + len(schema_cmd.README_END_MARK) + 1
    assert text[start:end] == schema_cmd.readme_topic_table(), (
        "README.md's topic table is stale: run `heft schema --update-doc README.md`"
    )


def test_topic_table_covers_every_topic_builder() -> None:
    t = Topics("heft", "bench-1")
    built = {
        t.status,
        t.measurement,
        t.measurement_last,
        t.live("d/0"),
        t.capture,
        t.device("d"),
        t.alarms,
        t.alarm_event,
        t.cmd,
        t.cmd_reply,
    }
    leaves = {
        f"heft/bench-1/{s.leaf}".replace("<device>/<index>", "d/0").replace("<device>", "d")
        for s in TOPIC_SPECS
    }
    assert built == leaves
    assert {s.payload for s in TOPIC_SPECS} <= set(schema_cmd.PAYLOADS)


def test_cli_prints_schema_and_updates_a_doc(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    assert heft_schema("measurement") == 0
    printed = json.loads(capsys.readouterr().out)
    assert printed["title"] == "Measurement"
    assert "total_weight_g" in printed["properties"]

    doc = tmp_path / "mqtt.md"
    doc.write_text(f"intro\n\n{schema_cmd.BEGIN_MARK}\nSTALE-CONTENT\n{schema_cmd.END_MARK}\n\nafter\n")
    assert heft_schema("--update-doc", str(doc)) == 0
    text = doc.read_text()
    assert text.startswith("intro\n\n")
    assert text.endswith("\nafter\n")
    assert "STALE-CONTENT" not in text
    assert schema_cmd.markdown() in text

    plain = tmp_path / "plain.md"
    plain.write_text("no markers here\n")
    assert heft_schema("--update-doc", str(plain)) == 2
    assert "markers not found" in capsys.readouterr().err
