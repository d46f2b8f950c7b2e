"""``heft config check FILE`` and ``heft config example [--geometry TYPE]``."""

from __future__ import annotations

import argparse
import sys
from pathlib import Path
from typing import Any

from heft.daemon.command_auth import KeyFileError, load_keys
from heft.daemon.config import GEOMETRY_TYPES, ConfigError, load_config
from heft.daemon.config_example import example_toml
from heft.daemon.config_sections import CommandsConfig
from heft.tui.commands._cli_io import print_error


def register(subparsers: Any) -> None:
    parser = subparsers.add_parser(
        "config",
        help="check a station config or print a commented example",
        description="Validate a station config without starting anything, or print an example.",
    )
    sub = parser.add_subparsers(dest="config_command", metavar="ACTION", required=True)
    check = sub.add_parser("check", help="validate FILE ('-': stdin); exit 2 naming each problem")
    check.add_argument("file", type=Path, metavar="FILE", help="the config, or - for stdin")
    check.set_defaults(func=_check)
    example = sub.add_parser("example", help="print a commented example config")
    example.add_argument(
        "--geometry",
        choices=GEOMETRY_TYPES,
        default="two_support",
        help="which bench layout the example shows (default: two_support)",
    )
    example.set_defaults(func=_example)


def _check(args: argparse.Namespace) -> int:
    try:
        config = load_config(args.file)
    except ConfigError as err:
        print_error("config", err)
        return 2
    devices = ", ".join(f"{d.name} ({d.driver})" for d in config.devices)
    try:
        commands = _commands_text(config.commands)
    except KeyFileError as err:
        print_error("config", KeyFileError(f"commands.keys_file: {err}"))
        return 2
    print(
        f"{args.file}: ok - station {config.station}, geometry {config.geometry.type}, "
        f"devices {devices}, {len(config.specs)} spec(s), {len(config.jobs)} job(s), "
        f"storage {config.storage.path}, mqtt {'on' if config.mqtt.enabled else 'off'}, "
        f"commands {commands}"
    )
    return 0


def _commands_text(commands: CommandsConfig) -> str:
    """Who may change the station; raises KeyFileError for a key file the station would refuse."""
    if commands.keys_file is not None:
        keys = load_keys(commands.keys_file)
        also = ", open bench" if commands.open_bench else ""
        return f"signed ({len(keys)} operator key(s){also})"
    return "open bench (unsigned accepted)" if commands.open_bench else "refused (no operator keys)"


def _example(args: argparse.Namespace) -> int:
    sys.stdout.write(example_toml(args.geometry))
    return 0
