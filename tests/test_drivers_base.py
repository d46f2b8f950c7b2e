"""The driver base classes: framing, counting, logging once per burst, never raising."""

from __future__ import annotations

import asyncio
import logging
from pathlib import Path
from typing import ClassVar

import pytest

from heft.drivers.base import FrameError, LineDriver, parse_decimal, parse_int
from heft.drivers.reading import DriverOutput, Flag
from heft.drivers.recording import ReplayTransport, read_recording
from heft.drivers.registry import create_driver
from heft.drivers.session import DeviceSession
from tests.test_drivers_serial import wait_for

FIXTURES = Path(__file__).resolve().parent.parent / "hardware_fixtures"


class GramsLine(LineDriver):
    """A minimal text protocol: each line is a number of grams; 'boom' is a parser bug."""

    name: ClassVar[str] = "grams_line"

    def parse_line(self, line: bytes, t_mono_s: float) -> list[DriverOutput]:
        text = self._text(line).strip()
        if text == "boom":
            raise ZeroDivisionError("a bug in a parser")
        return [self._mass_reading(value=parse_decimal(text, "weight"), unit="g",
                                   flags=Flag.STABLE, t_mono_s=t_mono_s, raw=line)]


def warnings_in(caplog: pytest.LogCaptureFixture) -> list[str]:
    return [r.getMessage() for r in caplog.records if r.levelno >= logging.WARNING]


def test_line_ends_cr_lf_crlf_across_chunks() -> None:
    d = GramsLine("bench-1")
    out = d.feed(b"1\r", 1.0) + d.feed(b"\n2\n3", 2.0) + d.feed(b"\r4\r\n", 3.0)
    assert [(o.value, o.t_mono_s) for o in out] == [(1.0, 1.0), (2.0, 2.0), (3.0, 3.0),
                                                   (4.0, 3.0)]


def test_bad_frames_logged_once_per_burst(caplog: pytest.LogCaptureFixture) -> None:
    caplog.set_level(logging.INFO, logger="heft.drivers")
    d = GramsLine("bench-1")
    d.feed(b"1\n", 0.0)  # synced: from now on bad lines are frame errors, not banner noise
    d.feed(b"x\ny\nz\n", 1.0)
    assert d.stats.frame_errors == 3
    assert len(warnings_in(caplog)) == 1 and "'bench-1'" in warnings_in(caplog)[0]
    d.feed(b"2\n", 2.0)  # burst over
    assert any("resynchronised after 3" in r.getMessage() for r in caplog.records)
    d.feed(b"q\n", 3.0)
    assert len(warnings_in(caplog)) == 2
    d.feed(b"r\n", 3.0 + 61.0)  # a long burst gets a reminder each minute
    assert len(warnings_in(caplog)) == 3 and "2 in this burst" in warnings_in(caplog)[-1]


def test_parser_bug_is_contained_and_counted(caplog: pytest.LogCaptureFixture) -> None:
    d = GramsLine("bench-1")
    out = d.feed(b"1\nboom\n2\n", 1.0)
    assert [o.value for o in out] == [1.0, 2.0]
    assert d.stats.frame_errors == 1 and "internal parser error" in d.stats.last_error
    assert any(r.exc_info for r in caplog.records)  # with a traceback, for the bug report


def test_banner_before_first_frame_is_noise_then_errors_count() -> None:
    d = GramsLine("bench-1")
    d.feed(b"Larkspur scale v2\r\nready\r\n", 1.0)
    assert (d.stats.noise_bytes, d.stats.frame_errors) == (len("Larkspur scale v2ready"), 0)
    d.feed(b"5\nnot a number\n", 2.0)
    assert (d.stats.noise_bytes, d.stats.frame_errors) == (22, 1)
    d.reset()  # port reopened: a new banner is noise again
    d.feed(b"booting\n", 3.0)
    assert d.stats.noise_bytes == 22 + 7


def test_endless_noise_suggests_baud_rate(caplog: pytest.LogCaptureFixture) -> None:
    d = GramsLine("bench-1")
    for i in range(30):
        d.feed(b"\xf0\x0f" * 20 + b"\n", float(i))
    messages = warnings_in(caplog)
    assert len(messages) == 1 and "baud rate" in messages[0]


def test_over_long_line_is_dropped_once_and_framing_recovers() -> None:
    d = GramsLine("bench-1", {"max_line_bytes": 16})
    d.feed(b"1\n", 0.0)
    out = d.feed(b"9" * 10, 1.0) + d.feed(b"9" * 10, 1.0) + d.feed(b"9" * 50 + b"\n7\n", 1.0)
    assert [o.value for o in out] == [7.0]
    assert d.stats.frame_errors == 1


def test_tabs_are_text_other_control_characters_are_not() -> None:
    d = GramsLine("bench-1")
    assert [o.value for o in d.feed(b"\t12.5\t\n", 1.0)] == [12.5]
    assert d.feed(b"1\x1b2\n", 1.0) == [] and d.stats.frame_errors == 1


def test_endless_line_without_line_end_is_one_error_and_bounded() -> None:
    """A device streaming bytes with no line end: one error, a bounded buffer, then recovery."""
    d = GramsLine("bench-1", {"max_line_bytes": 16})
    d.feed(b"1\n", 0.0)
    for i in range(100):
        assert d.feed(b"5" * 100, 1.0 + i) == []
        assert len(d._buf) <= 16
    assert d.stats.frame_errors == 1
    assert [o.value for o in d.feed(b"\n7\n", 200.0)] == [7.0]


def test_negative_zero_reads_as_zero() -> None:
    out = GramsLine("bench-1").feed(b"-0.00\n", 1.0)
    assert [str(o.value) for o in out] == ["0.0"]  # not "-0.0"


# float() would take all of these: other scripts' digits, "_" and "," separators, a digit run
# too long for a float (it comes back as inf), exponents, nan and inf.
@pytest.mark.parametrize("text", ["nan", "inf", "-Infinity", "1e3", "1e999", "1_000", "1,234.5",
                                  "", "+", ".", "0x10", "1.2.3", "\u0663", "12\u00b2",
                                  "9" * 400])
def test_parse_decimal_refuses_what_float_would_accept(text: str) -> None:
    with pytest.raises(FrameError):
        parse_decimal(text, "weight")


def test_overlong_digit_run_never_becomes_a_reading() -> None:
    d = GramsLine("bench-1", {"max_line_bytes": 1024})
    d.feed(b"1\n", 0.0)
    assert d.feed(b"9" * 400 + b"\n", 1.0) == []
    assert d.stats.frame_errors == 1 and "out of range" in d.stats.last_error


def test_parse_int_range() -> None:
    assert parse_int("-12", "x", -20, 0) == -12
    with pytest.raises(FrameError, match="outside"):
        parse_int("65536", "seq", 0, 65535)


async def test_replies_go_to_the_caller_waiting_for_that_command() -> None:
    rec = read_recording(FIXTURES / "recordings/beam_2ch.jsonl")  # holds '#OK RATE 10' at 0.72 s
    transport = ReplayTransport(rec, hold_open=True)
    session = DeviceSession("beam-1", create_driver("beam", "beam-1"), transport)

    async def run() -> None:
        async for _ in session.outputs():
            pass

    task = asyncio.create_task(run())
    try:
        await wait_for(lambda: session.is_open, "port open")
        identify, rate = await asyncio.gather(
            session.send_command("identify", reply_timeout_s=1.5),
            session.send_command("rate", "10", reply_timeout_s=5.0))
    finally:
        task.cancel()
        await asyncio.gather(task, return_exceptions=True)
    assert identify is None  # the recording never answers !ID with #OK ID
    assert rate is not None and (rate.command, rate.ok, rate.detail) == ("rate", True, "RATE 10")
    assert transport.written[:3] == [b"!ID\n", b"!ID\n", b"!RATE 10\n"]
