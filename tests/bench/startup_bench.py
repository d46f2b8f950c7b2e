"""Start-up benchmark: ``heft calc`` against a bare interpreter start, side by side.

Run: ``.venv/bin/python -m tests.bench.startup_bench`` (``--runs N``, ``--venv DIR``, ``--json``).

The wheel is built from the checkout and installed into a clean venv, the way a bench installs
heft (``tests.wheel_env``); ``--venv DIR`` reuses such a venv instead. Each round runs, in turn,
the venv's ``python -c pass`` and the venv's ``heft calc --weight 405g --balance-point 29.2in``
(and, for reference, ``heft --version``), so the machine's load falls on all of them alike. The
figure is the median wall time of N rounds (default 10) and the ratio of the medians.

Target (issue: a wheel that works, quick start-up): ``heft calc`` at most 5x the bare start.
"""

from __future__ import annotations

import argparse
import json
import statistics
import subprocess
import sys
import tempfile
import time
from collections.abc import Sequence
from pathlib import Path

from tests.wheel_env import install_wheel

TARGET_RATIO = 5.0
CALC_ARGS = ("calc", "--weight", "405g", "--balance-point", "29.2in")


def _wall_s(argv: Sequence[str], cwd: Path) -> float:
    started = time.perf_counter()
    done = subprocess.run(list(argv), cwd=cwd, capture_output=True, check=False)
    elapsed = time.perf_counter() - started
    if done.returncode != 0:
        raise SystemExit(f"{' '.join(argv)} failed: {done.stderr.decode(errors='replace')}")
    return elapsed


def measure(bin_dir: Path, runs: int, cwd: Path) -> dict[str, list[float]]:
    commands = {
        "python -c pass": [str(bin_dir / "python"), "-c", "pass"],
        "heft calc": [str(bin_dir / "heft"), *CALC_ARGS],
        "heft --version": [str(bin_dir / "heft"), "--version"],
    }
    for argv in commands.values():  # warm the page cache and .pyc files once, untimed
        _wall_s(argv, cwd)
    times: dict[str, list[float]] = {name: [] for name in commands}
    for _ in range(runs):
        for name, argv in commands.items():
            times[name].append(_wall_s(argv, cwd))
    return times


def main(argv: Sequence[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--runs", type=int, default=10, help="rounds (default 10)")
    parser.add_argument("--venv", type=Path, help="an existing venv with heft installed")
    parser.add_argument("--json", action="store_true", help="print the figures as JSON")
    args = parser.parse_args(argv)
    with tempfile.TemporaryDirectory(prefix="heft-startup-") as tmp:
        if args.venv is not None:
            bin_dir, cwd = args.venv / "bin", Path(tmp)
        else:
            print("building the wheel into a clean venv ...", file=sys.stderr)
            installed = install_wheel(Path(tmp))
            bin_dir, cwd = installed.bin, installed.cwd
        times = measure(bin_dir, args.runs, cwd)
    medians = {name: statistics.median(values) for name, values in times.items()}
    bare = medians["python -c pass"]
    ratio = medians["heft calc"] / bare
    if args.json:
        print(json.dumps({"runs": args.runs, "median_s": medians, "calc_ratio": ratio}))
        return 0
    print(f"start-up, median of {args.runs} rounds (wall time, same venv, same run)")
    print(f"{'command':<18} {'median ms':>10} {'min ms':>8} {'x bare':>7}")
    for name, values in times.items():
        print(f"{name:<18} {medians[name] * 1e3:>10.1f} {min(values) * 1e3:>8.1f} "
              f"{medians[name] / bare:>7.2f}")  # fmt: skip
    verdict = "met" if ratio <= TARGET_RATIO else "MISSED"
    print(f"heft calc / bare start = {ratio:.2f} (target <= {TARGET_RATIO:.0f}: {verdict})")
    return 0


if __name__ == "__main__":
    sys.exit(main())
