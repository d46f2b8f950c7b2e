"""kill -9 of a process writing measurements leaves a sound database with every reported row."""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import time
from pathlib import Path

from heft.daemon.storage import Store

ROOT = Path(__file__).resolve().parents[1]

# The writer reports each seq on stdout only after add_measurement returned (commit + fsync),
# then, after its last row, waits on stdin so the kill always lands on a live process.
WRITER = """
import sys
from heft.daemon.storage import Store
from tests.sample_records import make_measurement
store = Store(sys.argv[1])
for seq in range(1, int(sys.argv[2]) + 1):
    store.add_measurement(make_measurement(seq))
    print(seq, flush=True)
sys.stdin.read()
"""


def test_kill_9_mid_burst_keeps_every_committed_row(tmp_path: Path) -> None:
    db = tmp_path / "crash.db"
    total, kill_after = 200, 40
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    proc = subprocess.Popen(
        [sys.executable, "-c", WRITER, str(db), str(total)],
        stdin=subprocess.PIPE,
        stdout=subprocess.PIPE,
        cwd=ROOT,
        env=env,
        text=True,
    )
    assert proc.stdout is not None
    reported: list[int] = []
    deadline = time.monotonic() + 30
    try:
        while len(reported) < kill_after and time.monotonic() < deadline:
            line = proc.stdout.readline()
            if not line:
                break
            reported.append(int(line))
        assert len(reported) >= kill_after, "writer stopped early"
        proc.send_signal(signal.SIGKILL)
        rest = proc.stdout.read()  # lines already in the pipe were committed too
        reported += [int(x) for x in rest.split()]
    finally:
        proc.kill()
        proc.wait(timeout=10)
    assert proc.returncode == -signal.SIGKILL

    with Store(db) as store:
        assert store.integrity_check() == "ok"
        stored = {m.seq for m in store.measurements()}
        # Every row the writer saw committed is there; at most one more (committed, not printed).
        assert set(reported) <= stored
        assert len(stored - set(reported)) <= 1
        assert stored == set(range(1, len(stored) + 1))  # no gaps: each commit is whole
        assert store.outbox_count() == len(stored)  # each measurement has its outbox row
