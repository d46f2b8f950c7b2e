"""Dashboard keeping up: 4 channels at 80 samples/s pushed into the app for a while.

Run: ``.venv/bin/python -m tests.bench.dashboard_bench`` (``--seconds S``, default 10).

The app runs headless (Textual's pilot, 120x40) on the scripted session; then live readings of
four channels are pushed at 80 samples/s each, in 0.1 s bursts as the service's forwarder
sends them. Reported: readings pushed and folded, readings dropped, CPU seconds of this process
over the push (``time.process_time``, the pusher included, so an upper bound for the
dashboard), the state-change messages handled (one per batch the worker took), widget refreshes
(every ``refresh()`` of every widget on the screen), how late a 10 ms sleeper on the same
event loop woke (median and maximum), and the longest garbage collection in the window: a full
(generation 2) collection of Textual's object graph takes tens of milliseconds here and, when
one falls inside the window, it is the maximum lateness.
"""

from __future__ import annotations

import argparse
import asyncio
import gc
import os
import statistics
import time
from collections import Counter
from typing import Any

from textual.widget import Widget

from heft.daemon.events import LiveReading
from heft.drivers.reading import Flag
from heft.tui.app import HeftDashboard
from heft.tui.scripted_bench import JOBS, STATION, session_events
from heft.tui.source import ScriptedSource

CHANNELS = tuple(f"beam/{i}" for i in range(4))
RATE_HZ = 80
BURST_S = 0.1


async def run(seconds: float) -> dict[str, Any]:
    source = ScriptedSource(session_events(), jobs=JOBS)
    app = HeftDashboard(source)
    handled = Counter[str]()
    original_publish = app._publish

    def publish(areas: frozenset[Any]) -> None:
        handled["state changes"] += 1
        original_publish(areas)

    app._publish = publish  # type: ignore[method-assign]
    async with app.run_test(size=(120, 40)) as pilot:
        while len(app.state.measurements) < 7:
            await pilot.pause(0.05)
        await pilot.pause(0.5)
        refreshes = Counter[str]()
        widget_refresh = Widget.refresh

        def counted(widget: Widget, *args: Any, **kwargs: Any) -> Widget:
            refreshes["refreshes"] += 1
            return widget_refresh(widget, *args, **kwargs)

        Widget.refresh = counted  # type: ignore[method-assign,assignment]  # new rows too
        handled.clear()
        lateness_s: list[float] = []
        done = asyncio.Event()

        async def sleeper() -> None:
            while not done.is_set():
                t0 = time.monotonic()
                await asyncio.sleep(0.01)
                lateness_s.append(time.monotonic() - t0 - 0.01)

        gc_s: list[float] = []
        gc_start = [0.0]

        def gc_timer(phase: str, info: dict[str, Any]) -> None:
            if phase == "start":
                gc_start[0] = time.perf_counter()
            else:
                gc_s.append(time.perf_counter() - gc_start[0])

        gc.callbacks.append(gc_timer)
        watch = asyncio.create_task(sleeper())
        applied = app.state.events_applied
        pushed = 0
        per_burst = round(RATE_HZ * BURST_S)
        cpu0, wall0 = time.process_time(), time.monotonic()
        tick = 0
        while time.monotonic() - wall0 < seconds:
            burst = []
            for _ in range(per_burst):
                t = 5000.0 + tick / RATE_HZ
                burst += [LiveReading(station=STATION, channel=ch, t_mono_s=t,
                                      value_g=100.0 + tick % 50, flags=Flag.STABLE)
                          for ch in CHANNELS]
                tick += 1
            source.push(*burst)
            pushed += len(burst)
            await asyncio.sleep(BURST_S - (time.monotonic() - wall0) % BURST_S)
        for _ in range(1000):  # bounded: 10 s at most for the backlog to be folded
            if app.state.events_applied - applied >= pushed - source.dropped:
                break
            await pilot.pause(0.01)
        await pilot.pause(0.2)
        cpu_s, wall_s = time.process_time() - cpu0, time.monotonic() - wall0
        Widget.refresh = widget_refresh  # type: ignore[method-assign]
        gc.callbacks.remove(gc_timer)
        done.set()
        await watch
    return {
        "readings pushed": pushed,
        "readings folded": app.state.events_applied - applied,
        "dropped": source.dropped,
        "wall s": round(wall_s, 2),
        "cpu s": round(cpu_s, 2),
        "cpu share of one core": round(cpu_s / wall_s, 3),
        "state changes handled": handled["state changes"],
        "widget refreshes": refreshes["refreshes"],
        "loop late median ms": round(statistics.median(lateness_s) * 1000, 1),
        "loop late max ms": round(max(lateness_s) * 1000, 1),
        "longest gc pause ms": round(max(gc_s, default=0.0) * 1000, 1),
        "ui errors": app.ui_errors,
        "load average (1 min)": round(os.getloadavg()[0], 2),
    }


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--seconds", type=float, default=10.0)
    args = parser.parse_args()
    result = asyncio.run(run(args.seconds))
    for key, value in result.items():
        print(f"{key:<24}{value}")


if __name__ == "__main__":
    main()
