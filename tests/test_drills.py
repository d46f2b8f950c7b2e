"""Fault drills, short versions (the long soaks: ``python -m tests.bench.drills --long``).

Each drill runs a real station: a simulated beam on a pty, ``heft run`` as a child process,
Mosquitto on a free loopback port, SQLite on disk; the subscriber keeps a persistent session.
Every wait is bounded and polls for a condition; nothing here depends on this machine's speed.
"""

from __future__ import annotations

import os
from pathlib import Path

import pytest

from tests.bench.command_flood import command_flood
from tests.bench.drills import (
    DrillResult,
    broker_outage,
    disk_full,
    fuzz,
    kill_service,
    unplug_replug,
)


def assert_clean(r: DrillResult) -> None:
    assert r.lost == 0, r.notes
    assert r.undetected_duplicates == 0, r.notes
    assert r.integrity_failures == 0, r.notes
    assert r.measurements >= 2  # the drill really measured clubs


async def test_broker_killed_for_five_seconds_loses_nothing(tmp_path: Path) -> None:
    r = await broker_outage(tmp_path, 5.0, kill=True)
    assert_clean(r)
    assert r.detect_s and r.detect_s[0] < 10.0  # the station noticed the broker was gone
    assert r.recover_s  # and delivered its backlog once it returned


async def test_device_unplugged_and_replugged_four_times(tmp_path: Path) -> None:
    r = await unplug_replug(tmp_path, 4)
    assert_clean(r)
    assert len(r.detect_s) == len(r.recover_s) == 4


async def test_service_killed_three_times_during_a_burst(tmp_path: Path) -> None:
    r = await kill_service(tmp_path, 3)
    assert_clean(r)
    assert len(r.recover_s) == 3


@pytest.mark.skipif(os.geteuid() != 0, reason="mounting a small tmpfs needs root")
async def test_database_disk_full_raises_an_alarm_and_recovers(tmp_path: Path) -> None:
    r = await disk_full(tmp_path, 3.0)
    assert_clean(r)
    assert r.detect_s, "the storage-failed alarm was never seen"
    assert r.recover_s


def test_fuzzed_frames_never_raise_and_never_take_a_good_frame_with_them() -> None:
    r, rows = fuzz(1000)
    assert r.integrity_failures == 0, r.notes  # no exception out of Driver.feed
    assert r.lost == 0  # every good frame after a bad one still became a reading
    assert {row[0] for row in rows} >= {"beam", "poll_balance", "stream_balance", "regex_line",
                                        "scanner", "hid_pos"}
    assert all(int(str(row[2])) > 0 for row in rows)  # bad frames were seen and counted


async def test_nested_json_flood_neither_silences_nor_commands_the_station(
    tmp_path: Path,
) -> None:
    r = await command_flood(tmp_path, 20.0)
    assert r.accepted_anonymous == 0, r.notes  # no unsigned tare, zero, span, ... took effect
    assert r.probes >= 50
    assert r.answered_share >= 0.99, r.notes  # pings answered within 1 s
    assert r.reconnects == 0, r.notes  # the flood never dropped the link
    assert_clean(r)
