"""The obvious way to read a serial device: a bare pyserial loop, as a separate process.

``python -m tests.bench.readline_sink PORT SECONDS [readline|chunks]`` opens PORT with pyserial,
reads for one warm-up second and then for SECONDS, and prints one JSON line:
``{"lines": n, "seconds": s}``. ``readline`` is ``Serial.readline()`` in a loop (what most
scripts do); ``chunks`` reads whatever is waiting and splits it into lines (the fastest plain
Python way), as a second reference.
"""

from __future__ import annotations

import json
import sys
import time

import serial


def main(argv: list[str]) -> int:
    port, seconds = argv[0], float(argv[1])
    mode = argv[2] if len(argv) > 2 else "readline"
    s = serial.Serial(port, 115200, timeout=0.5)
    s.reset_input_buffer()
    t_warm = time.monotonic() + 1.0
    n = 0
    t0 = 0.0
    rest = b""
    counting = False
    while True:
        now = time.monotonic()
        if not counting and now >= t_warm:
            counting, n, t0 = True, 0, now
        if counting and now - t0 >= seconds:
            break
        if mode == "readline":
            if s.readline():
                n += 1
        else:
            data = s.read(max(1, s.in_waiting))
            lines = (rest + data).split(b"\n")
            rest = lines.pop()
            n += len(lines)
    print(json.dumps({"lines": n, "seconds": time.monotonic() - t0}), flush=True)
    s.close()
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
