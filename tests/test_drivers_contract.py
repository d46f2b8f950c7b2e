"""The driver contract (drivers/base.py), checked against every driver the registry knows.

One test class, rerun for each name ``heft.drivers.registry.available_drivers()`` returns, so a
newly registered driver is held to the contract without editing this file. Each driver is read
with traffic from its own recording in hardware_fixtures/recordings/ (the first file, by name,
whose header names the driver); a driver without one fails here with a message saying to add it.
What is particular to one protocol stays in that protocol's own test file.

The contract: options are validated, a bad one named with the device and the option; ``feed``
never raises, whatever the bytes; good frames become readings (grams with the unit the device
sent, or ADC counts), club tags or device info, stamped with the arrival time of the chunk that
completed them; bad frames are counted, logged once per burst, and the next good frame is read
exactly (resynchronised); ``reset`` forgets a partial frame; host commands are bytes or a
refusal naming the driver and the command; statistics count what went through.
"""

from __future__ import annotations

import logging
import math
from pathlib import Path

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from heft.drivers import units
from heft.drivers.base import (
    HOST_COMMANDS,
    Driver,
    DriverConfigError,
    LineDriver,
    UnsupportedCommand,
)
from heft.drivers.reading import ClubTag, DeviceInfo, DriverOutput, Reading, ValueKind
from heft.drivers.recording import Chunk, Recording, read_recording, replay_outputs
from heft.drivers.registry import available_drivers, create_driver, get_driver_class

RECORDINGS = Path(__file__).resolve().parent.parent / "hardware_fixtures" / "recordings"
T0 = 1000.0  # replay clock offset, so a timestamp that ignores the arrival time shows up

# Not a frame for any protocol: bytes outside ASCII break every text line (and a beam line
# starting with '$' is a frame attempt, so it counts as an error rather than noise), and its
# length is no whole binary report.
GARBAGE = b"$\xff\x00 not a frame *0000\r\n"

# Bytes that look like frames make the fuzzing reach the parsers, not just the framing.
frame_alphabet = st.sampled_from(list(b"SDIZT+-,.0123456789 gkozlb#$*!ABCDEF\r\n\x00\xff"))
framey_bytes = st.lists(frame_alphabet, max_size=400).map(bytes)
any_bytes = st.binary(max_size=400)


def essence(outputs: list[DriverOutput]) -> list[tuple[object, ...]]:
    """What two runs must agree on: every field of a reading, the repr of anything else."""
    return [
        (o.channel, o.value, o.device_unit, o.flags, o.raw, o.seq, o.device_time_s, o.t_mono_s)
        if isinstance(o, Reading) else (repr(o),)
        for o in outputs
    ]


def recordings_of(name: str) -> list[Recording]:
    """Every recording in hardware_fixtures/recordings/ read by driver ``name``, by file name."""
    found = (read_recording(p) for p in sorted(RECORDINGS.glob("*.jsonl")))
    return [rec for rec in found if rec.header.driver == name]


def fresh(rec: Recording) -> Driver:
    h = rec.header
    return create_driver(h.driver, h.device, h.options)


def rx_chunks(rec: Recording) -> list[Chunk]:
    return [c for c in rec.rx if c.device == rec.header.device]


def frame_boundary(rec: Recording) -> int:
    """Index of the first chunk after which a good frame was read and no frame is half sent."""
    driver = fresh(rec)
    line_framed = isinstance(driver, LineDriver)
    produced = False
    for i, chunk in enumerate(rx_chunks(rec)[:-1]):
        produced |= bool(driver.feed(chunk.data, T0 + chunk.t))
        if produced and (not line_framed or chunk.data.endswith((b"\n", b"\r"))):
            return i
    pytest.fail(f"{rec.header.driver}: its recording has no good frame followed by more traffic")


@pytest.fixture(params=available_drivers())
def name(request: pytest.FixtureRequest) -> str:
    return str(request.param)


@pytest.fixture
def recording(name: str) -> Recording:
    found = recordings_of(name)
    if not found:
        pytest.fail(f"driver {name!r} has no recording in hardware_fixtures/recordings/: add one "
                    "(a heft recording whose header names the driver, e.g. written by "
                    "hardware_fixtures/make_recordings.py) so the driver contract can be checked")
    return found[0]


class TestDriverContract:
    """What every registered driver promises (drivers/base.py)."""

    def test_is_a_driver_registered_under_its_own_name(self, name: str) -> None:
        cls = get_driver_class(name)
        assert issubclass(cls, Driver)
        assert cls.name == name

    def test_its_recording_is_real_traffic(self, recording: Recording) -> None:
        assert rx_chunks(recording), "the recording holds no received bytes"

    # -- options -------------------------------------------------------------------------

    def test_an_unknown_option_is_named_with_the_device(self, name: str,
                                                         recording: Recording) -> None:
        with pytest.raises(DriverConfigError) as err:
            create_driver(name, "contract-1", {**recording.header.options, "no_such_opt": 1})
        message = str(err.value)
        assert "'contract-1'" in message and name in message and "no_such_opt" in message
        for option in get_driver_class(name).Options.model_fields:  # the valid ones are listed
            assert option in message

    def test_an_option_of_the_wrong_type_is_named(self, name: str,
                                                  recording: Recording) -> None:
        for option in get_driver_class(name).Options.model_fields:
            with pytest.raises(DriverConfigError) as err:
                create_driver(name, "contract-1", {**recording.header.options, option: object()})
            assert "'contract-1'" in str(err.value) and option in str(err.value)

    def test_a_missing_required_option_is_named(self, name: str, recording: Recording) -> None:
        fields = get_driver_class(name).Options.model_fields
        for option in [o for o, f in fields.items() if f.is_required()]:
            options = {k: v for k, v in recording.header.options.items() if k != option}
            with pytest.raises(DriverConfigError) as err:
                create_driver(name, "contract-1", options)
            assert "'contract-1'" in str(err.value) and option in str(err.value)

    # -- device bytes ----------------------------------------------------------------------

    @settings(max_examples=150, deadline=None,
              suppress_health_check=[HealthCheck.function_scoped_fixture])
    @given(chunks=st.lists(st.one_of(any_bytes, framey_bytes), max_size=8))
    def test_feed_never_raises_and_counts_what_went_through(
        self, recording: Recording, chunks: list[bytes]
    ) -> None:
        driver = fresh(recording)
        readings = 0
        for i, chunk in enumerate(chunks):
            out = driver.feed(chunk, float(i))
            readings += sum(isinstance(o, Reading) for o in out)
            for o in out:
                if isinstance(o, (Reading, ClubTag)):
                    assert o.raw in b"".join(chunks)
        assert driver.stats.readings == readings
        assert driver.stats.bytes_in == sum(map(len, chunks))

    def test_its_recording_reads_as_timestamped_outputs_in_units(self, name: str) -> None:
        for rec in recordings_of(name) or [pytest.fail(f"{name}: no recording")]:
            driver = fresh(rec)
            outputs = replay_outputs(rec, driver, t0=T0)
            chunks = rx_chunks(rec)
            arrivals = {T0 + c.t for c in chunks}
            received = b"".join(c.data for c in chunks)
            assert any(isinstance(o, (Reading, ClubTag)) for o in outputs), "nothing read"
            for o in outputs:
                assert o.device == rec.header.device
                if isinstance(o, DeviceInfo):
                    assert o.channels >= 1
                    continue
                assert o.t_mono_s in arrivals  # the arrival time of the completing chunk
                assert o.raw and o.raw in received
                if isinstance(o, ClubTag):
                    assert o.club_id
                elif o.kind is ValueKind.GRAMS:
                    units.mass_to_g(1.0, o.device_unit)  # a unit heft converts (else raises)
                    assert math.isfinite(o.value) or not o.usable
                else:
                    assert o.device_unit == "counts" and o.value == int(o.value)
            stamps = [o.t_mono_s for o in outputs if not isinstance(o, DeviceInfo)]
            assert stamps == sorted(stamps)
            s = driver.stats
            # Real traffic may hold a device's own error reply (a balance's "S I" busy), but
            # good frames are the rule.
            assert s.frame_errors < s.frames, f"{rec.header.description}: {s.last_error}"
            assert s.readings == sum(isinstance(o, Reading) for o in outputs)
            assert s.bytes_in == len(received)

    def test_bad_frames_are_counted_logged_once_and_resynchronised(
        self, name: str, recording: Recording, caplog: pytest.LogCaptureFixture
    ) -> None:
        chunks = rx_chunks(recording)
        k = frame_boundary(recording)
        clean = fresh(recording)
        for chunk in chunks[:k + 1]:
            clean.feed(chunk.data, T0 + chunk.t)
        expected = [o for c in chunks[k + 1:] for o in clean.feed(c.data, T0 + c.t)]

        driver = fresh(recording)
        for chunk in chunks[:k + 1]:
            driver.feed(chunk.data, T0 + chunk.t)
        before = driver.stats.frame_errors
        caplog.set_level(logging.INFO, logger="heft.drivers")
        t_bad = T0 + chunks[k].t
        for _ in range(3):
            assert driver.feed(GARBAGE, t_bad) == []
        after = [o for c in chunks[k + 1:] for o in driver.feed(c.data, T0 + c.t)]

        assert driver.stats.frame_errors == before + 3
        assert essence(after) == essence(expected)  # the next good frame is read exactly
        messages = [r.getMessage() for r in caplog.records]
        assert len([m for m in messages if f"bad {name} frame" in m]) == 1  # once per burst
        assert any("resynchronised after 3 bad frame(s)" in m for m in messages)

    def test_reset_forgets_a_partial_frame(self, recording: Recording) -> None:
        chunks = rx_chunks(recording)
        k = frame_boundary(recording)
        clean = fresh(recording)
        first = [o for c in chunks[:k + 1] for o in clean.feed(c.data, T0 + c.t)]
        expected = [o for c in chunks[k + 1:] for o in clean.feed(c.data, T0 + c.t)]
        raw = next(o.raw for o in first + expected if isinstance(o, (Reading, ClubTag)))

        driver = fresh(recording)
        for chunk in chunks[:k + 1]:
            driver.feed(chunk.data, T0 + chunk.t)
        driver.feed(raw[: max(1, len(raw) // 2)], T0 + chunks[k].t)  # the port drops mid-frame
        driver.reset()
        after = [o for c in chunks[k + 1:] for o in driver.feed(c.data, T0 + c.t)]
        assert essence(after) == essence(expected)

    # -- host to device --------------------------------------------------------------------

    def test_host_commands_are_bytes_or_a_named_refusal(self, name: str,
                                                        recording: Recording) -> None:
        driver = fresh(recording)
        for command in HOST_COMMANDS:
            try:
                wire = driver.command(command, "10" if command == "rate" else None)
            except UnsupportedCommand as err:
                assert name in str(err) and repr(command) in str(err)
            else:
                assert isinstance(wire, bytes) and wire
        with pytest.raises(UnsupportedCommand, match="unknown command 'launch'"):
            driver.command("launch")
        for hook in (driver.on_open(), driver.poll_request()):
            assert hook is None or (isinstance(hook, bytes) and hook)
        if driver.poll_request() is not None:
            assert driver.poll_interval_s is not None and driver.poll_interval_s > 0

    def test_replies_are_handed_over_once(self, recording: Recording) -> None:
        driver = fresh(recording)
        replay_outputs(recording, driver, t0=T0)
        replies = driver.pop_replies()
        assert driver.stats.replies == len(replies)
        assert all(r.device == recording.header.device for r in replies)
        assert driver.pop_replies() == []
