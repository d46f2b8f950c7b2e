"""Stopping child processes the tests and benchmarks start: SIGTERM, a bounded wait, SIGKILL."""

from __future__ import annotations

import subprocess
from collections.abc import Iterable
from typing import Any


def stop_processes(procs: Iterable[subprocess.Popen[Any]], timeout_s: float = 10.0) -> None:
    """Ask every process to stop at once, then kill any that has not ended after ``timeout_s``."""
    procs = list(procs)
    for proc in procs:
        if proc.poll() is None:
            proc.terminate()
    for proc in procs:
        try:
            proc.wait(timeout=timeout_s)
        except subprocess.TimeoutExpired:
            proc.kill()
            proc.wait(timeout=10)
