"""``heft dash --broker URL [--station ID] [--commands]``: the dashboard of a remote station.

Connection settings are the station's own ``MqttSettings``, built from the URL and the TLS and
password options, and the client comes from the same factory the station's link uses
(``heft.daemon.mqtt_client``), so a broker with a private CA or client certificates works the
same for both. The password comes from ``--password-file`` or ``$HEFT_MQTT_PASSWORD`` so it need
not appear on the command line (where other users can read it in the process list).
"""

from __future__ import annotations

import argparse
import os
from pathlib import Path
from typing import TYPE_CHECKING, Any

from pydantic import SecretStr

from heft.daemon.command_auth import KeyFileError, Signer
from heft.daemon.mqtt_settings import MqttSettings, TlsSettings
from heft.daemon.mqtt_topics import TopicError, check_level

if TYPE_CHECKING:
    from heft.tui.mqtt_source import MqttSource

PASSWORD_ENV = "HEFT_MQTT_PASSWORD"


def _station(text: str) -> str:
    try:
        return check_level(text, "station")
    except TopicError as err:
        raise argparse.ArgumentTypeError(str(err)) from None


def _readable_file(text: str) -> Path:
    path = Path(text)
    if not path.is_file():
        raise argparse.ArgumentTypeError(f"{text}: no such file")
    return path


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
        help="mqtt://[user@]host[:port][/topic-root] (mqtts:// for TLS)",
    )
    p.add_argument(
        "--station", type=_station, help="show only this station (default: all; pick with s)"
    )
    p.add_argument(
        "--commands",
        action="store_true",
        help="allow commands (tare, re-arm, job, acknowledge, calibrate) to the station",
    )
    p.add_argument(
        "--key-file",
        type=_readable_file,
        metavar="FILE",
        help="sign commands with the operator key in FILE (heft keys new); the station "
        "refuses unsigned state-changing commands unless its bench is open",
    )
    p.add_argument("--bell", action="store_true", help="ring the terminal bell on FAIL and alarms")
    auth = p.add_argument_group("credentials and TLS (any TLS option turns TLS on)")
    auth.add_argument(
        "--password-file",
        type=_readable_file,
        metavar="FILE",
        help=f"read the broker password from FILE (default: ${PASSWORD_ENV}, if set)",
    )
    auth.add_argument("--tls-ca", type=_readable_file, metavar="FILE", help="CA certificate(s)")
    auth.add_argument("--tls-cert", type=_readable_file, metavar="FILE", help="client certificate")
    auth.add_argument("--tls-key", type=_readable_file, metavar="FILE", help="client key")
    auth.add_argument(
        "--tls-insecure",
        action="store_true",
        help="skip the broker's host name check (testing only)",
    )
    p.set_defaults(func=run, _parser=p)


def settings_from_args(args: argparse.Namespace) -> MqttSettings:
    """The broker URL plus the TLS and password options. Raises BrokerUrlError / OSError."""
    from heft.tui.mqtt_source import settings_from_url

    settings = settings_from_url(args.broker)
    update: dict[str, Any] = {}
    password = os.environ.get(PASSWORD_ENV) or None
    if args.password_file is not None:
        password = args.password_file.read_text(encoding="utf-8").rstrip("\r\n")
    if password is not None:
        update["password"] = SecretStr(password)
    if args.tls_ca or args.tls_cert or args.tls_key or args.tls_insecure:
        update["tls"] = TlsSettings(
            ca_file=args.tls_ca,
            cert_file=args.tls_cert,
            key_file=args.tls_key,
            insecure=args.tls_insecure,
        )
    return settings.model_copy(update=update)


def build_source(args: argparse.Namespace) -> MqttSource:
    """The dashboard's event source for the parsed options; a bad option exits with a message."""
    from heft.tui.mqtt_source import BrokerUrlError, MqttSource

    parser: argparse.ArgumentParser = args._parser
    if args.tls_cert is None and args.tls_key is not None:
        parser.error("--tls-key: needs --tls-cert")
    try:
        settings = settings_from_args(args)
    except BrokerUrlError as err:
        parser.error(f"--broker: {err}")
    except (OSError, UnicodeDecodeError) as err:
        parser.error(f"--password-file: {err}")
    signer = None
    if args.key_file is not None:
        if not args.commands:
            parser.error("--key-file: signs commands; add --commands")
        try:
            signer = Signer.from_file(args.key_file)
        except KeyFileError as err:
            parser.error(f"--key-file: {err}")
    return MqttSource(settings, args.station, commands_enabled=args.commands, signer=signer)


def run(args: argparse.Namespace) -> int:
    # Imported here: the dashboard pulls in Textual, which other commands do not need.
    from heft.tui.app import HeftDashboard

    source = build_source(args)
    HeftDashboard(source, station=args.station, bell=args.bell).run()
    return 0
