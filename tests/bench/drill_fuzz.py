"""The fuzz drill: recorded frames mutated at random, fed to every driver the registry knows.

Counts what each driver did with a mutated frame (a frame error, a reading with the same or an
altered value, never an exception) and checks that a good frame after a bad one is still read.
"""

from __future__ import annotations

import random
import struct
import time
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from heft.drivers.reading import ClubTag, Reading
from heft.drivers.recording import read_recording
from heft.drivers.registry import available_drivers, create_driver
from tests.bench.drill_result import DrillResult
from tests.bench.rig import REPO


@dataclass
class FuzzCorpus:
    driver: str
    options: dict[str, Any]
    good: list[bytes]  # frames that produce a reading or tag
    values: dict[bytes, set[object]]  # what each good frame says (values or club ids)
    framed: bool  # True: one frame per feed (HID reports); False: a byte stream of lines


def _line_corpus(recording: Path) -> FuzzCorpus:
    rec = read_recording(recording)
    stream = b"".join(c.data for c in rec.rx)
    lines = [line + b"\n" for line in stream.replace(b"\r\n", b"\n").split(b"\n") if line]
    driver = create_driver(rec.header.driver, "fuzz", rec.header.options)
    values: dict[bytes, set[object]] = {}
    for line in lines:
        said = {_said(o) for o in driver.feed(line, 0.0) if isinstance(o, Reading | ClubTag)}
        if said:
            values[line] = said
    return FuzzCorpus(rec.header.driver, dict(rec.header.options), list(values), values,
                      framed=False)


def _said(output: Reading | ClubTag) -> object:
    return output.club_id if isinstance(output, ClubTag) else output.value


def _hid_corpus() -> FuzzCorpus:
    # Data reports (docs/protocols.md section d): id 3, status 4 (stable), unit 2 (g), exp -1.
    good = [struct.pack("<BBBbH", 3, 4, 2, -1, w) for w in range(0, 5000, 37)]
    driver = create_driver("hid_pos", "fuzz", {})
    values = {g: {_said(o) for o in driver.feed(g, 0.0) if isinstance(o, Reading)} for g in good}
    return FuzzCorpus("hid_pos", {}, good, values, framed=True)


def fuzz_corpora() -> list[FuzzCorpus]:
    # Text recordings only: a binary one (hid_pos) is whole reports, fuzzed by _hid_corpus.
    corpora = [_line_corpus(p) for p in sorted((REPO / "hardware_fixtures/recordings").glob(
        "*.jsonl")) if not read_recording(p).header.binary]
    corpora.append(_hid_corpus())
    return corpora


def _mutate(frame: bytes, rng: random.Random) -> bytes:
    data = bytearray(frame)
    kind = rng.randrange(7)
    if kind == 0 and data:  # flip bits
        for _ in range(rng.randint(1, 3)):
            i = rng.randrange(len(data))
            data[i] ^= 1 << rng.randrange(8)
    elif kind == 1 and data:  # replace bytes with any byte
        for _ in range(rng.randint(1, 4)):
            data[rng.randrange(len(data))] = rng.randrange(256)
    elif kind == 2 and data:  # truncate
        del data[rng.randrange(len(data)):]
    elif kind == 3:  # insert random bytes
        i = rng.randrange(len(data) + 1)
        data[i:i] = bytes(rng.randrange(256) for _ in range(rng.randint(1, 8)))
    elif kind == 4:  # pure garbage
        data = bytearray(rng.randbytes(rng.randint(1, 64)))
    elif kind == 5:  # an over-long line
        data = bytearray(rng.randbytes(1)) * rng.randint(300, 5000)
    else:  # delete a span
        if data:
            i = rng.randrange(len(data))
            del data[i:i + rng.randint(1, 6)]
    return bytes(data)


def _outputs_of(driver: Any, frame: bytes, framed: bool, rng: random.Random) -> list[Any]:
    if framed:
        return list(driver.feed(frame, 0.0))
    out: list[Any] = []
    i = 0
    while i < len(frame):  # random chunking, as a serial port delivers
        j = min(len(frame), i + rng.randint(1, 24))
        out.extend(driver.feed(frame[i:j], 0.0))
        i = j
    return out


def fuzz(frames_per_driver: int, seed: int = 1) -> tuple[DrillResult, list[list[object]]]:
    """Fuzzed frames through every protocol driver, each followed by a good frame (a canary).

    Lost = a canary after a fuzzed frame that did not come out as a reading (a bad frame took a
    good one with it); any exception out of ``feed`` counts as an integrity failure.
    """
    rng = random.Random(seed)
    result = DrillResult(f"fuzz {frames_per_driver} frames x driver", repetitions=0)
    rows: list[list[object]] = []
    corpora = fuzz_corpora()
    covered = {c.driver for c in corpora}
    missing = set(available_drivers()) - covered
    if missing:
        result.notes.append(f"drivers without a corpus: {sorted(missing)}")
    for corpus in corpora:
        driver = create_driver(corpus.driver, "fuzz", corpus.options)
        lost = crashes = accepted = altered = 0
        t0 = time.perf_counter()
        for _ in range(frames_per_driver):
            original = rng.choice(corpus.good)
            frame = _mutate(original, rng)
            try:
                got = _outputs_of(driver, frame, corpus.framed, rng)
                if not corpus.framed:
                    got += driver.feed(b"\r\n", 0.0)
                said = [_said(o) for o in got if isinstance(o, Reading | ClubTag)]
                accepted += len(said)
                altered += sum(v not in corpus.values[original] for v in said)
                canary = _outputs_of(driver, rng.choice(corpus.good), corpus.framed, rng)
            except Exception as err:  # the drill's point: feed must never raise
                crashes += 1
                result.notes.append(f"{corpus.driver}: feed raised {err!r}")
                continue
            if not any(isinstance(o, Reading | ClubTag) for o in canary):
                lost += 1
        seconds = time.perf_counter() - t0
        result.repetitions += frames_per_driver
        result.lost += lost
        result.integrity_failures += crashes
        rows.append([corpus.driver, frames_per_driver, driver.stats.frame_errors, accepted,
                     altered, lost, crashes, f"{frames_per_driver / seconds:.0f}"])
    return result, rows
