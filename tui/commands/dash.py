"""``heft dash --broker URL [--station ID] [--commands]``: the dashboard of a remote station."""

from __future__ import annotations

import argparse
from typing import Any

from heft.daemon.mqtt_topics import TopicError, check_level


def _station(text: str) -> str:
    try:
        return check_level(text, "station")
    except TopicError as err:
        raise argparse.ArgumentTypeError(str(err)) from None


def register(subparsers: Any) -> None:
    p: argparse.ArgumentParser = subparsers.add_parser(
        "dash",
        help="the dashboard of a running station, through an MQTT broker",
        description=(
            "Show a running station's readings, captures, verdicts and alarms from an MQTT "
            "broker. Read-only unless --commands is given. Keys: ? for help, q to quit."
        ),
    )
    p.add_argument(
        "--broker",
        required=True,
        metavar="URL",
        help="mqtt://[user[:password]@]host[:port][/topic-root] (mqtts:// for TLS)",
    )
    p.add_argument(
        "--station", type=_station, help="show only this station (default: all; pick with s)"
    )
    p.add_argument(
        "--commands",
        action="store_true",
        help="allow commands (tare, re-arm, job, acknowledge, calibrate) to the station",
    )
    p.add_argument("--bell", action="store_true", help="ring the terminal bell on FAIL and alarms")
    p.set_defaults(func=run, _parser=p)


def run(args: argparse.Namespace) -> int:
    # Imported here: the dashboard pulls in Textual, which other commands do not need.
    from heft.tui.app import HeftDashboard
    from heft.tui.mqtt_source import BrokerUrlError, MqttSource

    parser: argparse.ArgumentParser = args._parser
    try:
        source = MqttSource(args.broker, args.station, commands_enabled=args.commands)
    except BrokerUrlError as err:
        parser.error(f"--broker: {err}")
    HeftDashboard(source, station=args.station, bell=args.bell).run()
    return 0
