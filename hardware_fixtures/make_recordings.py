"""Write the protocol recordings in hardware_fixtures/ (run from the repo root).

    .venv/bin/python hardware_fixtures/make_recordings.py

The files are committed; this script documents how they were made and re-creates them byte for
byte (fixed timestamps, seeded chunk splits). The scenario is invented: Larkspur Clubworks,
stations bench-1 and qc-1. Chunk boundaries are split at seeded random places, as a USB-serial
adapter splits them, so every test also exercises framing across chunks.

Tests (tests/test_drivers_*.py) assert exact readings for these files: change a line here and
the test expectations must change with it.
"""

from __future__ import annotations

import functools
import operator
import random
import sys
from collections.abc import Iterable, Sequence
from datetime import UTC, datetime
from pathlib import Path

ROOT = Path(__file__).resolve().parent
sys.path.insert(0, str(ROOT.parent))
sys.path.insert(0, str(ROOT.parent / "drivers" / "firmware" / "heft_beam"))

import framing  # noqa: E402  (the reference firmware's own framing: fixtures match the board)

from heft.drivers.recording import Chunk, RecordingHeader, write_recording  # noqa: E402

CREATED = datetime(2026, 5, 4, 8, 30, tzinfo=UTC)
Event = tuple[float, str, bytes]  # (t seconds, 'rx' | 'tx', bytes)


def split(t: float, data: bytes, rng: random.Random, *, byte_s: float = 0.001) -> list[Event]:
    """Cut ``data`` into 1-4 chunks at random places; later chunks a little later."""
    cuts = sorted(rng.sample(range(1, len(data)), k=min(len(data) - 1, rng.randint(0, 3))))
    out: list[Event] = []
    start = 0
    for end in [*cuts, len(data)]:
        out.append((round(t + start * byte_s, 4), "rx", data[start:end]))
        start = end
    return out


def lines_at(
    lines: Iterable[tuple[float, bytes]], rng: random.Random, *, byte_s: float = 0.001
) -> list[Event]:
    events: list[Event] = []
    for t, data in lines:
        events.extend(split(t, data, rng, byte_s=byte_s))
    return events


def save(
    path: Path, *, device: str, driver: str, options: dict[str, object], description: str,
    events: Sequence[Event],
) -> None:
    header = RecordingHeader(device=device, driver=driver, options=options,
                             created_utc=CREATED, description=description)
    ordered = sorted(events, key=lambda e: e[0])
    rx = b"".join(d for _, direction, d in events if direction == "rx")
    if b"".join(d for _, direction, d in ordered if direction == "rx") != rx:
        raise SystemExit(f"{path.name}: chunks of two lines overlap in time; space them out")
    chunks = [Chunk(t, device, data, direction)  # type: ignore[arg-type]
              for t, direction, data in ordered]
    write_recording(path, header, chunks)


def crlf(*texts: str) -> list[bytes]:
    return [t.encode("latin-1") + b"\r\n" for t in texts]


# --- a. poll balance ------------------------------------------------------------------------


def poll_balance_continuous(rng: random.Random) -> None:
    """A 7-iron head-and-shaft assembly set on the balance in continuous mode, tared, lifted."""
    replies = crlf(
        "S S       0.00 g",
        "S D      87.12 g",
        "S D     311.56 g",
        "S D     335.02 g",
        "S D     331.84 g",
        "S S     332.41 g",
        "S S     332.41 g",
        "T S     332.41 g",  # tare taken (reply to T)
        "S S       0.00 g",
        "S D    -150.20 g",
        "S S    -332.41 g",
    )
    events: list[Event] = [(0.0, "tx", b"SIR\r\n")]
    times = [0.10, 0.20, 0.30, 0.40, 0.50, 0.60, 0.70, 0.95, 1.05, 1.15, 1.25]
    events += lines_at(zip(times, replies, strict=True), rng)
    events.append((0.90, "tx", b"T\r\nSIR\r\n"))
    save(ROOT / "recordings" / "poll_balance_continuous.jsonl", device="bench-1",
         driver="poll_balance", options={"mode": "continuous"}, events=events,
         description="continuous send (SIR): empty, placing a 7-iron head+shaft, settling, "
                     "tare, lifting")


def poll_balance_polled(rng: random.Random) -> None:
    """Polled with SI; a zero refused while moving, then accepted; identify."""
    exchange = [
        (0.00, b"SI\r\n", "S D      12.07 g"),
        (0.25, b"SI\r\n", "S I"),  # busy: no value
        (0.50, b"SI\r\n", "S S       0.31 g"),
        (0.60, b"Z\r\n", "Z I"),  # refused: not stable
        (0.75, b"SI\r\n", "S S       0.31 g"),
        (0.85, b"Z\r\n", "Z A"),
        (1.00, b"SI\r\n", "S S       0.00 g"),
        (1.10, b"@\r\n", 'I4 A "LC0042117"'),
        (1.25, b"SI\r\n", "S S      45.90 g"),
    ]
    events: list[Event] = []
    for t, tx, reply in exchange:
        events.append((t, "tx", tx))
        events += split(t + 0.02, reply.encode() + b"\r\n", rng)
    save(ROOT / "recordings" / "poll_balance_polled.jsonl", device="qc-1", driver="poll_balance",
         options={"mode": "poll", "poll_interval_s": 0.25}, events=events,
         description="SI polling, busy reply, zero refused then done, identity")


# --- b. stream balance ----------------------------------------------------------------------


def stream_balance(rng: random.Random) -> None:
    """A driver head weighed on a streaming balance; the operator switches g -> oz mid-stream."""
    lines = crlf(
        "ST,GS,+00000.00   g",
        "US,GS,+00121.80   g",
        "US,GS,+00199.36   g",
        "US,GS,+00197.02   g",
        "ST,GS,+00198.14   g",
        "ST,GS,+00198.14   g",
        "ST,GS,+0006.989  oz",  # unit switched on the balance: 198.14 g shown in oz
        "ST,TR,+0006.989  oz",  # tare taken: a tare value, not a reading
        "ST,NT,+0000.000  oz",
        "US,NT,-0006.120  oz",
    )
    times = [0.1 * (i + 1) for i in range(len(lines))]
    save(ROOT / "recordings" / "stream_balance.jsonl", device="bench-2", driver="stream_balance",
         options={}, events=lines_at(zip(times, lines, strict=True), rng),
         description="streaming at 10 Hz: placing a driver head, unit change g->oz, tare, lift")


# --- c. regex line --------------------------------------------------------------------------

REGEX_OPTIONS: dict[str, object] = {
    "pattern": r"(?P<stable>[SN])\s+(?P<value>[+-]?\s*[0-9.]+)\s*(?P<unit>[a-z]+)",
    "stable_match": "S",
    "poll": "P",
    "poll_interval_s": 0.2,
}


def regex_line(rng: random.Random) -> None:
    """A kitchen-style scale printing 'S +  0045.2 g' / 'N ...' when polled with P."""
    replies = ["N +  0000.0 g", "N +  0044.8 g", "N +  0045.6 g", "S +  0045.2 g",
               "S +  0045.2 g", "S -  0000.4 g"]
    events: list[Event] = []
    for i, reply in enumerate(replies):
        t = 0.2 * i
        events.append((t, "tx", b"P\r\n"))
        events += split(t + 0.03, reply.encode() + b"\r\n", rng)
    save(ROOT / "recordings" / "regex_line.jsonl", device="bench-3", driver="regex_line",
         options=REGEX_OPTIONS, events=events,
         description="polled generic line scale: a grip weighed, then removed")


# --- e. beam --------------------------------------------------------------------------------

# What an ESP32 prints on its UART0 after the DTR reset that opening the port causes
# (ROM bootloader text, then MicroPython's own start-up line). Includes bytes sent at the ROM's
# 74880 baud that arrive as garbage at 115200.
ESP32_BOOT_BANNER = (
    b"\xe0\x00\xfe\x80\x1c\x80\x00\r\n"
    b"ets Jul 29 2019 12:21:46\r\n\r\n"
    b"rst:0x1 (POWERON_RESET),boot:0x13 (SPI_FAST_FLASH_BOOT)\r\n"
    b"configsip: 0, SPIWP:0xee\r\n"
    b"mode:DIO, clock div:2\r\n"
    b"entry 0x400805f0\r\n"
    b"MicroPython v1.23.0 on 2024-06-02; Generic ESP32 module with ESP32\r\n"
    b"Type \"help()\" for more information.\r\n"
)

BEAM_BYTE_S = 0.0001  # about 115200 baud

# Settling counts of a two-cell beam: a club set down at sample 3 (offsets ~ -8123 / 15880).
BEAM_COUNTS = [
    (-8123, 15880), (-8120, 15877), (-8125, 15884),
    (402311, 251003), (457950, 286512), (441208, 276016),
    (446930, 279598), (445301, 278581), (445812, 278902), (445790, 278889),
]


def beam(rng: random.Random) -> None:
    """Boot banner, HELLO, samples at 80 Hz, a rate change to 10 Hz and its new HELLO."""
    events: list[Event] = [(0.0, "tx", b"!ID\n")]
    data = ESP32_BOOT_BANNER + framing.hello_line("hb-mpy-1.0", 2, 80, 24, "e8db84a1b2c3")
    events += split(0.35, data, rng, byte_s=BEAM_BYTE_S)
    t = 0.5
    for i, counts in enumerate(BEAM_COUNTS):
        events += split(t, framing.sample_line(i, 4000 + 12 * i, list(counts)), rng,
                        byte_s=BEAM_BYTE_S)
        t += 0.0125
    events.append((0.70, "tx", b"!RATE 10\n"))
    events += split(0.72, framing.ok_line("RATE 10")
                    + framing.hello_line("hb-mpy-1.0", 2, 10, 24, "e8db84a1b2c3"), rng,
                    byte_s=BEAM_BYTE_S)
    events += split(0.80, framing.sample_line(0, 4300, [445800, 278895]), rng,
                    byte_s=BEAM_BYTE_S)
    events += split(0.90, framing.sample_line(1, 4400, [445797, 278893]), rng,
                    byte_s=BEAM_BYTE_S)
    save(ROOT / "recordings" / "beam_2ch.jsonl", device="beam-1", driver="beam", options={},
         events=events,
         description="ESP32 two-cell beam after DTR reset: boot banner, HELLO, settling "
                     "samples, !RATE 10")


# --- f. scanner -----------------------------------------------------------------------------


def scanner(rng: random.Random) -> None:
    """Code 128 club labels read with the AIM symbology prefix ']C1' enabled on the scanner."""
    scans = crlf("]C1LC-10231", "]C1LC-10232", "]C1LC-20017")
    save(ROOT / "recordings" / "scanner.jsonl", device="scan-1", driver="scanner",
         options={"prefix": "]C1", "pattern": "LC-[0-9]{5}"},
         events=lines_at(zip([0.5, 4.2, 9.8], scans, strict=True), rng),
         description="three club labels scanned at a QC station")


# --- d. USB HID point-of-sale scale ---------------------------------------------------------


def hid_pos() -> None:
    """A driver head on a USB HID scale, a zero sent, then the operator switches to ounces.

    One chunk per interrupt transfer, as the USB transport delivers them: whole 6-byte data
    reports [0x03, status, unit, exponent, weight LSB, weight MSB] (docs/protocols.md d), hex
    written by hand. No seeded splitting: a report is never cut.
    """
    reports = [
        (0.1, "03 02 02 ff 00 00"),  # stable at zero, 0 x 0.1 g
        (0.2, "03 03 02 ff 3b 0b"),  # in motion, 0x0b3b = 2875 -> 287.5 g
        (0.3, "03 03 02 ff 1a 0c"),  # in motion, 0x0c1a = 3098 -> 309.8 g
        (0.4, "03 04 02 ff 1e 0c"),  # stable, 0x0c1e = 3102 -> 310.2 g
        (0.6, "03 04 0b fe 7a 04"),  # stable, ounces (11), 0x047a = 1146 x 0.01 -> 11.46 oz
        (0.7, "03 02 0b fe 00 00"),  # lifted: stable at zero, in ounces
    ]
    chunks = [Chunk(t, "hid-1", bytes.fromhex(hex_), "rx") for t, hex_ in reports]
    chunks.insert(4, Chunk(0.5, "hid-1", bytes.fromhex("02 01"), "tx"))  # zero (control report)
    header = RecordingHeader(device="hid-1", driver="hid_pos", options={}, created_utc=CREATED,
                             binary=True, description="USB HID scale: zero, a driver head "
                             "settling at 310.2 g, a zero request, then ounces")
    write_recording(ROOT / "recordings" / "hid_pos.jsonl", header, chunks)


# --- malformed input on purpose -------------------------------------------------------------


def malformed(rng: random.Random) -> None:
    bad = ROOT / "malformed"
    # a: device error codes, busy, truncated lines, binary noise, over- and underload, a line
    # longer than the driver's limit, a bad unit.
    lines = [
        *crlf("S S      10.00 g", "ES", "ET", "EL", "S I", "S S     1"),
        b"\x00\xff\xfe\x00\r\n",
        b"S S      10.50 g\r\n",
        b"S +\r\n", b"S -\r\n",
        b"S S " + b"9" * 300 + b" g\r\n",
        b"S S      10.50 lbs\r\n",
        b"S D      10.25 g\r\n",
    ]
    save(bad / "poll_balance_errors.jsonl", device="qc-1", driver="poll_balance",
         options={"mode": "continuous"},
         events=lines_at(zip([0.1 * i for i in range(len(lines))], lines, strict=True), rng),
         description="error replies, busy, truncated, noise, overload, underload, over-long line, "
                     "unknown unit, then a good line")
    # b: unit switches g -> oz -> lb -> kg mid-stream, overload codes, truncated and noise lines.
    lines = [*crlf(
        "ST,GS,+00250.00   g",
        "ST,GS,+0008.818  oz",
        "ST,GS,+0.551155  lb",
        "OL,GS,+9999999  lb",
        "OL,GS,",
        "ST,GS,+001",  # truncated
        "ST,XX,+00250.00   g",  # unknown header
        "ST,GS,+00250.00  mm",  # not a mass unit
        "ST,GS,+0.250000  kg",
    ), b"\xfe\xfe\x7f\r\n"]
    save(bad / "stream_balance_units_overload.jsonl", device="bench-2",
         driver="stream_balance", options={},
         events=lines_at(zip([0.1 * i for i in range(len(lines))], lines, strict=True), rng),
         description="unit switches, overload lines, truncated and noise lines")
    # e: checksum faults. Good frames are from the firmware's framing; bad ones are edits of them.
    good = [framing.sample_line(i, 1000 + 100 * i, [5000 + i, -3000 - i]) for i in range(8)]
    # The check is the last 4 characters before the LF; "0000" unless the right CRC is 0000.
    wrong_sum = good[1][:-5] + (b"0000" if not good[1].endswith(b"*0000\n") else b"0001") + b"\n"
    t_ms = next(t for t in range(1200, 1300)  # a CRC with a letter in it
                if not f"{framing.checksum(f'2,{t},5002,-3002'.encode()):04X}".isdigit())
    lower_hex = framing.frame("$", f"2,{t_ms},5002,-3002")
    lower_hex = lower_hex[:-5] + lower_hex[-5:-1].lower() + b"\n"
    no_sum = b"$3,1300,5003,-3003\n"
    # The form before CRC-16: the two-digit XOR (NMEA 0183 rule) of the same body.
    xor_body = b"3,1300,5003,-3003"
    xor_form = b"$" + xor_body + b"*" + b"%02X" % functools.reduce(operator.xor, xor_body) + b"\n"
    flipped = good[4].replace(b"5004", b"5014")  # a corrupted digit, checksum now wrong
    # Two digits swapped: an XOR sum cannot see it (same bytes, other order), the CRC does.
    swapped = good[4].replace(b"-3004", b"-3040")
    truncated = good[5][:9]  # the cable jerked: half a line, then the next line runs on
    streams = [
        framing.hello_line("hb-mpy-1.0", 2, 10, 24, "0001"),
        good[0], wrong_sum, lower_hex, no_sum, xor_form, flipped, swapped, truncated + good[6],
        good[7],
        framing.sample_line(8, 1800, [8388607, -3008]),  # channel 0 saturated high
        framing.sample_line(9, 1900, [5009, -8388608]),  # channel 1 saturated low
        framing.sample_line(12, 2200, [5012, -3012]),  # seq 10 and 11 lost
        framing.sample_line(13, 2300, [5013, -3013, 77]),  # three channels: HELLO said two
        framing.sample_line(14, 2400, [5014, -3014]),
        framing.err_line("unknown command FOO"),
    ]
    save(bad / "beam_bad_frames.jsonl", device="beam-1", driver="beam", options={},
         events=lines_at(zip([0.1 * i for i in range(len(streams))], streams, strict=True), rng),
         description="wrong, lower-case, missing and old two-digit checksums, a flipped digit, "
                     "two swapped digits, a truncated line, ADC saturation, a sequence gap, a "
                     "channel-count mismatch")
    # e: a board that prints its boot banner after the DTR reset, then works, then goes silent.
    events = split(0.0, ESP32_BOOT_BANNER, rng, byte_s=BEAM_BYTE_S)
    events += split(0.30, framing.hello_line("hb-mpy-1.0", 1, 80, 24, "0002"), rng,
                    byte_s=BEAM_BYTE_S)
    for i in range(3):
        events += split(0.40 + 0.0125 * i, framing.sample_line(i, 300 + 12 * i, [1200 + i]), rng,
                        byte_s=BEAM_BYTE_S)
    save(bad / "beam_boot_then_silent.jsonl", device="beam-2", driver="beam", options={},
         events=events,
         description="ESP32 boot banner after DTR reset, HELLO, three samples, then silence "
                     "(the board hung): nothing after t=0.43")
    # e: a board flashed with a future, incompatible protocol version.
    streams = [framing.frame("#", "HELLO heft-beam/2 fw=hb-next ch=1 rate=80 bits=24 sn=0003"),
               framing.sample_line(0, 10, [100]), framing.sample_line(1, 22, [101])]
    save(bad / "beam_version_2.jsonl", device="beam-3", driver="beam", options={},
         events=lines_at(zip([0.1, 0.2, 0.3], streams, strict=True), rng),
         description="HELLO of heft-beam/2: refused, its samples ignored")
    # f: scanner faults.
    scans = [b"]C1LC-10231\r\n", b"\r\n", b"]C1LC-1\x07231\r\n", b"LC-10232\r\n",
             b"]C1XX-99999\r\n", b"]C1\r\n", b"]C1LC-10233\r\n"]
    save(bad / "scanner_bad_scans.jsonl", device="scan-1", driver="scanner",
         options={"prefix": "]C1", "pattern": "LC-[0-9]{5}"},
         events=lines_at(zip([0.5 * i for i in range(len(scans))], scans, strict=True), rng),
         description="blank line, control character, missing prefix, id not matching, empty id")


def main() -> None:
    rng = random.Random(20260504)
    (ROOT / "recordings").mkdir(exist_ok=True)
    (ROOT / "malformed").mkdir(exist_ok=True)
    for make in (poll_balance_continuous, poll_balance_polled, stream_balance, regex_line, beam,
                 scanner, malformed):
        make(rng)
    hid_pos()  # last, and without the shared random generator: the files above stay as they are


if __name__ == "__main__":
    main()
