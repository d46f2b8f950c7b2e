"""Registry, option validation and host-command encoding: clear errors naming what is wrong."""

from __future__ import annotations

import sys
import textwrap
from pathlib import Path

import pytest

from heft.drivers.base import DriverConfigError, UnknownDriverError, UnsupportedCommand
from heft.drivers.registry import DRIVERS, available_drivers, create_driver, get_driver_class


def test_unknown_driver_lists_valid_names() -> None:
    with pytest.raises(UnknownDriverError) as err:
        get_driver_class("mettle_scale")
    message = str(err.value)
    assert "'mettle_scale'" in message
    for name in DRIVERS:
        assert name in message
    assert isinstance(err.value, ValueError)


@pytest.mark.parametrize("name", sorted(DRIVERS))
def test_every_registered_driver_loads_with_its_own_name(name: str) -> None:
    cls = get_driver_class(name)
    assert cls.name == name


@pytest.mark.parametrize(("name", "options", "fragments"), [
    ("poll_balance", {"mode": "fast"}, ["'qc-1'", "mode: ", "'poll' or 'continuous'", "'fast'"]),
    ("poll_balance", {"poll_interval_s": 0}, ["poll_interval_s: ", "greater than 0"]),
    ("poll_balance", {"rate": 5}, ["rate: unknown option", "mode", "poll_interval_s"]),
    ("stream_balance", {"max_line_bytes": 4}, ["max_line_bytes: ", "greater than or equal to 16"]),
    ("regex_line", {}, ["pattern: is required"]),
    ("regex_line", {"pattern": "(?P<value>[0-9"}, ["pattern: ", "not a valid regular expression"]),
    ("regex_line", {"pattern": "[0-9]+"}, ["pattern: ", "(?P<value>"]),
    ("regex_line", {"pattern": "(?P<value>.*)", "default_unit": "stone"},
     ["default_unit: ", "unknown mass unit"]),
    ("beam", {"adc_bits": 4}, ["adc_bits: ", "greater than or equal to 8"]),
    ("scanner", {"pattern": "(["}, ["pattern: ", "not a valid regular expression"]),
])
def test_bad_options_name_device_option_and_expected_form(
    name: str, options: dict[str, object], fragments: list[str]
) -> None:
    with pytest.raises(DriverConfigError) as err:
        create_driver(name, "qc-1", options)
    for fragment in fragments:
        assert fragment in str(err.value)
    assert "device 'qc-1'" in str(err.value)


@pytest.mark.parametrize(("name", "options", "command", "arg", "wire"), [
    ("poll_balance", {}, "zero", None, b"Z\r\n"),
    ("poll_balance", {}, "tare", None, b"T\r\n"),
    ("poll_balance", {"mode": "continuous"}, "zero", None, b"Z\r\nSIR\r\n"),
    ("poll_balance", {"mode": "continuous"}, "identify", None, b"@\r\nSIR\r\n"),
    ("stream_balance", {}, "tare", None, b"T\r\n"),
    ("regex_line", {"pattern": "(?P<value>.*)", "commands": {"zero": "ZERO"},
                    "terminator": "\\r"}, "zero", None, b"ZERO\r"),
    ("beam", {}, "identify", None, b"!ID\n"),
    ("beam", {}, "rate", "80", b"!RATE 80\n"),
    ("beam", {}, "reboot", None, b"!REBOOT\n"),
])
def test_host_commands_encode_per_protocol(
    name: str, options: dict[str, object], command: str, arg: str | None, wire: bytes
) -> None:
    assert create_driver(name, "d", options).command(command, arg) == wire


@pytest.mark.parametrize(("name", "command", "arg"), [
    ("stream_balance", "reboot", None), ("poll_balance", "rate", "10"),
    ("scanner", "zero", None), ("beam", "tare", None), ("beam", "rate", "fast"),
    ("beam", "rate", None), ("beam", "rate", "0"),
    ("beam", "rate", "\u00b2"),  # str.isdigit() says yes, int() says no: still refused cleanly
    ("beam", "rate", "\u0663"),  # an Arabic-Indic 3: int() takes it, the board would not
])
def test_unsupported_commands_name_driver_and_command(
    name: str, command: str, arg: str | None
) -> None:
    with pytest.raises(UnsupportedCommand) as err:
        create_driver(name, "bench-1", {"pattern": "x"} if name == "regex_line" else {}).command(
            command, arg)
    assert name in str(err.value) and f"'{command}'" in str(err.value)


def test_unknown_command_lists_the_known_ones() -> None:
    with pytest.raises(UnsupportedCommand, match="zero, tare, identify, rate, reboot"):
        create_driver("beam", "beam-1").command("calibrate")


def test_entry_point_plugin_is_found(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    """An installed distribution declaring group heft.drivers adds a driver by name."""
    (tmp_path / "larkspur_gram_driver.py").write_text(textwrap.dedent('''
        from heft.drivers.base import LineDriver
        from heft.drivers.reading import Flag

        class GramLine(LineDriver):
            name = "larkspur_gram"

            def parse_line(self, line, t_mono_s):
                return [self._mass_reading(value=float(line), unit="g", flags=Flag.NONE,
                                           t_mono_s=t_mono_s, raw=line)]
    '''))
    dist = tmp_path / "larkspur_gram_driver-0.1.dist-info"
    dist.mkdir()
    (dist / "METADATA").write_text("Metadata-Version: 2.1\nName: larkspur-gram-driver\n"
                                   "Version: 0.1\n")
    (dist / "entry_points.txt").write_text(
        "[heft.drivers]\nlarkspur_gram = larkspur_gram_driver:GramLine\n")
    monkeypatch.syspath_prepend(str(tmp_path))
    assert "larkspur_gram" in available_drivers()
    driver = create_driver("larkspur_gram", "bench-9")
    (reading,) = driver.feed(b"12.5\r\n", 1.0)
    assert reading.value == 12.5  # type: ignore[union-attr]
    monkeypatch.delitem(sys.modules, "larkspur_gram_driver", raising=False)


def test_plugin_that_is_not_a_driver_is_refused(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    (tmp_path / "not_a_driver_mod.py").write_text("class Thing:\n    pass\n")
    dist = tmp_path / "not_a_driver-0.1.dist-info"
    dist.mkdir()
    (dist / "METADATA").write_text("Metadata-Version: 2.1\nName: not-a-driver\nVersion: 0.1\n")
    (dist / "entry_points.txt").write_text("[heft.drivers]\nthing = not_a_driver_mod:Thing\n")
    monkeypatch.syspath_prepend(str(tmp_path))
    with pytest.raises(DriverConfigError, match=r"not a drivers\.base\.Driver"):
        get_driver_class("thing")
