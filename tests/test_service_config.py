"""Station config: examples are valid, bad files name the field and exit 2, units convert."""

from __future__ import annotations

import subprocess
import sys
import tomllib
from pathlib import Path

import pytest

from heft.daemon.config import ConfigError, load_config, parse_config
from heft.daemon.config_example import example_toml
from heft.tui.cli import main
from tests.service_bench import station_toml

GEOMETRIES = ("two_support", "lever_beam", "single_scale")


@pytest.mark.parametrize("geometry", GEOMETRIES)
def test_printed_example_passes_config_check(
    geometry: str, tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    assert main(["config", "example", "--geometry", geometry]) == 0
    text = capsys.readouterr().out
    assert text.lstrip().startswith("#")  # commented
    path = tmp_path / "station.toml"
    path.write_text(text)
    assert main(["config", "check", str(path)]) == 0
    out = capsys.readouterr().out
    assert f"geometry {geometry}" in out


def test_example_values_and_units() -> None:
    cfg = parse_config(tomllib.loads(example_toml("two_support")))
    assert cfg.station == "bench-1"
    assert cfg.geometry.type == "two_support"
    assert cfg.geometry.position_b_in == 36.0
    assert cfg.active_spec_name() == "irons-d2"
    spec = cfg.specs["irons-d2"]
    assert spec.total_weight is not None and spec.total_weight.min_g == 380.0
    assert spec.clubs["pw"].swingweight == "D3"


def test_metric_positions_convert_to_inches() -> None:
    # 914.4 mm = 36 in exactly (1 in = 25.4 mm, international inch of 1959).
    text = example_toml("two_support").replace(
        'position_b_in = "36in"', 'position_b_in = "914.4mm"'
    )
    cfg = parse_config(tomllib.loads(text))
    assert cfg.geometry.position_b_in == pytest.approx(36.0, abs=1e-12)


@pytest.mark.parametrize(
    ("old", "new", "field", "expected"),
    [
        ('position_b_in = "36in"', 'position_b_in = "far"', "geometry.position_b_in", "a length"),
        ('position_b_in = "36in"', 'position_b_in = "36kg"', "geometry.position_b_in", "a length"),
        ('type = "two_support"', 'type = "tripod"', "geometry", "two_support, lever_beam"),
        ('channel_b = "beam/1"', 'channel_b = "scale/1"', "geometry.channel_b", "names no device"),
        ('driver = "beam"', 'driver = "bean"', "devices[0].driver", "valid drivers"),
        ('baudrate = 115200', 'baudrate = -1', "devices[0].baudrate", "greater than 0"),
        ('baudrate = 115200', 'baudrate = 9600\nserial = { parity = "X" }',
         "devices[0].serial.parity", "'N', 'E'"),
        ('swingweight = "D2"', 'swingweight = "H2"', "specs.irons-d2.swingweight", "letter"),
        ('2026]\nspec = "irons-d2"', '2026]\nspec = "woods"', "jobs.larkspur-irons-2026.spec",
         "not a spec"),
        ('preset_name = "hx711_80hz"', 'preset_name = "fast"', "capture.preset_name", "hx711"),
        ('tolerance_points = 0.5', 'tolerance_pts = 0.5', "specs.irons-d2.tolerance_pts",
         "unknown field; did you mean 'tolerance_points'?"),
        ('channel_b = "beam/1"', 'chanel_b = "beam/1"', "geometry.chanel_b",
         "unknown field; did you mean 'channel_b'?"),
        ('[channels."beam/1"]', '[channels."beam/9"]', "channels.beam/9",
         "the geometry reads no channel 'beam/9'"),
    ],
)
def test_bad_field_is_named(old: str, new: str, field: str, expected: str) -> None:
    text = example_toml("two_support")
    assert old in text
    with pytest.raises(ConfigError) as err:
        parse_config(tomllib.loads(text.replace(old, new, 1)))
    message = str(err.value)
    assert message.startswith(field + ":"), message
    assert expected in message


def test_config_check_exits_2_with_one_line(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    path = tmp_path / "bad.toml"
    path.write_text(example_toml("lever_beam").replace('lever_arm_in = "5in"', "lever_arm_in = -5"))
    assert main(["config", "check", str(path)]) == 2
    err = capsys.readouterr().err.strip()
    assert "\n" not in err
    assert "geometry.lever_arm_in" in err and "greater than 0" in err


def test_not_toml_names_the_line(tmp_path: Path) -> None:
    path = tmp_path / "broken.toml"
    path.write_text('station = "bench-1"\n[storage\n')
    with pytest.raises(ConfigError, match=r"not valid TOML.*line 2"):
        load_config(path)


def test_relative_storage_path_is_beside_the_config(tmp_path: Path) -> None:
    path = tmp_path / "station.toml"
    path.write_text(station_toml(port="/dev/null", db=Path("data/heft.db")))
    assert load_config(path).storage.path == tmp_path / "data" / "heft.db"


def test_heft_run_with_bad_config_exits_2_and_starts_nothing(tmp_path: Path) -> None:
    db = tmp_path / "never.db"
    path = tmp_path / "station.toml"
    text = station_toml(port="/dev/null", db=db).replace(
        'position_b_in = "36in"', "position_b_in = [1]"
    )
    path.write_text(text)
    proc = subprocess.run(
        [sys.executable, "-m", "heft.tui.cli", "run", "--config", str(path)],
        capture_output=True, text=True, timeout=60,
    )
    assert proc.returncode == 2
    assert "geometry.position_b_in" in proc.stderr
    assert not db.exists()  # nothing started: no database created


EXAMPLE_FILES = sorted((Path(__file__).resolve().parent.parent / "examples").glob("*.toml"))


@pytest.mark.parametrize("path", EXAMPLE_FILES, ids=lambda p: p.name)
def test_shipped_examples_pass_config_check(path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["config", "check", str(path)]) == 0
    assert "ok" in capsys.readouterr().out


def test_there_is_an_example_per_geometry() -> None:
    kinds = {load_config(p).geometry.type for p in EXAMPLE_FILES}
    assert kinds == set(GEOMETRIES)


def test_a_misspelt_top_level_key_is_named_with_every_problem(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    # QA: only "station: is required (and 1 more problem)"; the typo itself was never named.
    path = tmp_path / "station.toml"
    path.write_text(example_toml("two_support").replace('station = "bench-1"', 'statoin = "b"'))
    assert main(["config", "check", str(path)]) == 2
    assert capsys.readouterr().err.splitlines() == [
        f"heft config: {path}: statoin: unknown field; did you mean 'station'?",
        f"heft config: {path}: station: is required",
    ]


def test_config_check_reads_stdin() -> None:
    # `heft config example | heft config check -`
    example = subprocess.run(
        [sys.executable, "-m", "heft.tui.cli", "config", "example", "--geometry", "lever_beam"],
        capture_output=True, text=True, timeout=60, check=True,
    )
    checked = subprocess.run(
        [sys.executable, "-m", "heft.tui.cli", "config", "check", "-"],
        input=example.stdout, capture_output=True, text=True, timeout=60,
    )
    assert checked.returncode == 0, checked.stderr
    assert "geometry lever_beam" in checked.stdout
    bad = subprocess.run(
        [sys.executable, "-m", "heft.tui.cli", "config", "check", "-"],
        input=example.stdout.replace("lever_arm_in", "lever_arm_cm"),
        capture_output=True, text=True, timeout=60,
    )
    assert bad.returncode == 2
    assert "<stdin>: geometry.lever_arm_cm: unknown field; did you mean 'lever_arm_in'?" in (
        bad.stderr
    )


@pytest.mark.parametrize(
    ("old", "new", "expected"),
    [
        # A balance reads one channel (docs/protocols.md): scale/1 does not exist.
        ('weight_channel = "scale/0"', 'weight_channel = "scale/1"',
         "geometry.weight_channel: 'scale/1': a stream_balance device reads only scale/0"),
        ('force_channel = "lever/0"', 'force_channel = "nolever/0"',
         "geometry.force_channel: 'nolever/0' names no device"),
        ('[channels."lever/0"]', '[channels."lever/3"]',
         "channels.lever/3: the geometry reads no channel 'lever/3'"),
    ],
)
def test_channels_must_be_read_from_a_configured_device(old: str, new: str, expected: str) -> None:
    text = example_toml("lever_beam")
    assert old in text
    with pytest.raises(ConfigError) as err:
        parse_config(tomllib.loads(text.replace(old, new, 1)))
    assert expected in str(err.value)


def test_a_scanner_is_not_a_weight_channel() -> None:
    text = example_toml("single_scale").replace(
        'weight_channel = "scale/0"', 'weight_channel = "scanner/0"'
    )
    with pytest.raises(ConfigError, match=r"geometry\.weight_channel: 'scanner/0' is a scanner"):
        parse_config(tomllib.loads(text))
