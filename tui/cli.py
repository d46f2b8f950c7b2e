"""``heft`` command line: one sub-command per module in ``heft.tui.commands``.

Each command module exposes ``register(subparsers) -> None``, which adds its parser and sets
``func`` (``Callable[[argparse.Namespace], int]``) as the parser default. argparse already gives
the behaviour we want for bad input: one line naming the option, exit status 2.

Start-up: ``heft calc`` is typed many times a day, so only the chosen command's module is
imported; the full parser (every module) is built only for ``heft --help`` or a name that is not
a command, where argparse needs every sub-parser to answer.
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
    "keys",
    "run",
    "replay",
    "export",
    "report",
    "study",
    "devices",
    "schema",
)


def build_parser(names: Sequence[str] = COMMAND_MODULES) -> argparse.ArgumentParser:
    """The parser with the ``names`` commands (by default all); the others are not imported."""
    parser = argparse.ArgumentParser(
        prog="heft",
        description="Weigh golf clubs hands-free: total weight, balance point, swing weight.",
    )
    from heft.daemon.version import __version__

    parser.add_argument("--version", action="version", version=f"heft {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", required=True)
    for name in names:
        module = importlib.import_module(f"heft.tui.commands.{name}")
        module.register(sub)
    return parser


def commands_to_load(argv: Sequence[str]) -> tuple[str, ...]:
    """The command modules argparse needs for this line.

    The named command alone; none for ``heft --version``; all of them where argparse must list
    them (``heft --help``, a misspelt command, no command).
    """
    first = next((word for word in argv if not word.startswith("-")), None)
    if first in COMMAND_MODULES:
        return (first,)
    if first is None and argv and not {"-h", "--help"} & set(argv):
        return ()
    return COMMAND_MODULES


def main(argv: Sequence[str] | None = None) -> int:
    words = list(sys.argv[1:] if argv is None else argv)
    parser = build_parser(commands_to_load(words))
    args = parser.parse_args(words)
    func = cast(Callable[[argparse.Namespace], int], args.func)
    try:
        status = func(args)
        sys.stdout.flush()  # inside the try: a reader that left (| head) is a quiet end too
        return status
    except BrokenPipeError:
        from heft.tui.commands._cli_io import reader_went_away

        reader_went_away()
        return 0
    except KeyboardInterrupt:
        return 130


if __name__ == "__main__":
    sys.exit(main())
