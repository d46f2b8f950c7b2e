"""Small shared pieces of the service commands: errors on stderr, a reader closing stdout."""

from __future__ import annotations

import os
import sys


def reader_went_away() -> None:
    """Point stdout at /dev/null so the interpreter's final flush cannot fail again.

    The recipe from the Python documentation's note on SIGPIPE (library/signal.html).
    """
    devnull = os.open(os.devnull, os.O_WRONLY)
    os.dup2(devnull, sys.stdout.fileno())
    os.close(devnull)


def print_error(prog: str, err: Exception) -> None:
    """An error on stderr, every line of it led by ``heft <command>:`` (config problems are
    one per line)."""
    for line in str(err).splitlines() or [""]:
        print(f"heft {prog}: {line}", file=sys.stderr)
