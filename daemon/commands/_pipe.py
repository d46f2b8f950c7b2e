"""Standard output closed by its reader (``heft export | head``) is a normal end, not an error."""

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
