"""``heft`` command line: one sub-command per module in ``heft.tui.commands``.

Each command module exposes ``register(subparsers) -> None``, which adds its parser and sets
``func`` (``Callable[[argparse.Namespace], int]``) as the parser default. argparse already gives
the behaviour we want for bad input: one line naming the option, exit status 2.
"""

from __future__ import annotations

import argparse
import importlib
import sys
from collections.abc import Callable, Sequence
from typing import cast

# Order here is the order in ``heft --help``.
COMMAND_MODULES: tuple[str, ...] = (
    "demo",
    "dash",
    "calc",
    "simulate",
    "config",
    "run",
    "replay",
    "export",
    "devices",
    "schema",
)


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="heft",
        description="Weigh golf clubs hands-free: total weight, balance point, swing weight.",
    )
    from heft.daemon.version import __version__

    parser.add_argument("--version", action="version", version=f"heft {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", required=True)
    for name in COMMAND_MODULES:
        module = importlib.import_module(f"heft.tui.commands.{name}")
        module.register(sub)
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    func = cast(Callable[[argparse.Namespace], int], args.func)
    try:
        return func(args)
    except KeyboardInterrupt:
        return 130


if __name__ == "__main__":
    sys.exit(main())
