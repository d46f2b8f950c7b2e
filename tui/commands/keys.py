"""``heft keys new OPERATOR --file PATH``: a fresh operator key for signing station commands.

The file it writes (mode 0600) is the operator's own key file for ``heft dash --key-file``;
its one line is also what goes into the station's ``commands.keys_file`` (one line per
operator). The key is a secret: copy it only to the station and the operator's own machine.
"""

from __future__ import annotations

import argparse
from pathlib import Path
from typing import Any

from heft.daemon.command_auth import KeyFileError, new_key_file
from heft.tui.commands._cli_io import print_error


def register(subparsers: Any) -> None:
    parser = subparsers.add_parser(
        "keys",
        help="make an operator key for signing station commands",
        description="Operator keys sign the commands that change a station (docs/service.md).",
    )
    sub = parser.add_subparsers(dest="keys_command", metavar="ACTION", required=True)
    new = sub.add_parser(
        "new", help="write a new random key for OPERATOR to a new file (mode 0600)"
    )
    new.add_argument("operator", metavar="OPERATOR", help="operator id, e.g. ana or ana@line-2")
    new.add_argument(
        "--file", type=Path, required=True, metavar="PATH", help="the key file to create"
    )
    new.set_defaults(func=_new)


def _new(args: argparse.Namespace) -> int:
    try:
        new_key_file(args.file, args.operator)
    except KeyFileError as err:
        print_error("keys", err)
        return 2
    print(
        f"{args.file}: key for operator {args.operator} written (mode 0600). Append its line to "
        "the station's commands.keys_file; keep both secret."
    )
    return 0
