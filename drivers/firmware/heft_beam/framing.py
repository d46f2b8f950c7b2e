"""heft beam protocol v1 framing, shared by the board and the host-side tests.

Runs unchanged on MicroPython and CPython: no typing, no f-strings with format specs that older
MicroPython builds lack, no imports beyond the language. See docs/protocols.md section e.
"""

PROTOCOL = "heft-beam/1"
SEQ_MODULO = 65536
T_MS_MODULO = 1 << 32
MAX_COMMAND_BYTES = 64


CRC16_POLY = 0x1021
CRC16_INIT = 0xFFFF


def checksum(body):
    """CRC-16/CCITT-FALSE of ``body`` (bytes between the lead character and ``*``).

    Poly 0x1021, init 0xFFFF, most significant bit first, no final xor. Bit by bit and
    table-free (eight shifts per byte, no RAM for a table): MicroPython has no
    ``binascii.crc_hqx``. The host computes the same with ``binascii.crc_hqx(body, 0xFFFF)``.
    """
    crc = CRC16_INIT
    for b in body:
        crc ^= b << 8
        for _ in range(8):
            if crc & 0x8000:
                crc = ((crc << 1) ^ CRC16_POLY) & 0xFFFF
            else:
                crc = (crc << 1) & 0xFFFF
    return crc


def frame(lead, body):
    """``lead + body + '*HHHH\\n'`` as bytes; ``lead`` is '#' (messages) or '$' (samples).

    ``HHHH`` is the CRC-16 of the body in four upper-case hex digits.
    """
    if lead not in ("#", "$"):
        raise ValueError("lead must be '#' or '$'")
    raw = body.encode()
    if b"*" in raw or b"\n" in raw or b"\r" in raw:
        raise ValueError("body may not contain '*' or line ends")
    return lead.encode() + raw + b"*" + ("%04X" % checksum(raw)).encode() + b"\n"


def hello_line(firmware, channels, rate_hz, bits, serial):
    return frame("#", "HELLO %s fw=%s ch=%d rate=%d bits=%d sn=%s"
                 % (PROTOCOL, firmware, channels, rate_hz, bits, serial))


def sample_line(seq, t_ms, counts):
    """One sample: sequence number and device clock wrap (mod 2^16, 2^32) as the spec says."""
    fields = ["%d" % (seq % SEQ_MODULO), "%d" % (t_ms % T_MS_MODULO)]
    for c in counts:
        fields.append("%d" % c)
    return frame("$", ",".join(fields))


def ok_line(echo):
    return frame("#", "OK " + echo)


def err_line(message):
    return frame("#", "ERR " + message)


def adc_limits(bits):
    """(lowest, highest) code of a two's-complement ADC: the saturation values."""
    return -(1 << (bits - 1)), (1 << (bits - 1)) - 1


def from_twos_complement(raw, bits):
    """Signed value of a ``bits``-wide two's-complement word (the HX711 sends 24 bits)."""
    raw &= (1 << bits) - 1
    if raw & (1 << (bits - 1)):
        raw -= 1 << bits
    return raw


def parse_command(line):
    """Host command line (bytes, no checksum) -> (name, argument or None).

    Raises ValueError with a short message for anything that is not a command.
    """
    text = line.strip()
    try:
        text = text.decode()
    except (UnicodeError, AttributeError):
        raise ValueError("not text")
    if not text.startswith("!"):
        raise ValueError("commands start with '!'")
    parts = text[1:].split()
    if not parts:
        raise ValueError("empty command")
    name = parts[0].upper()
    if name in ("ID", "REBOOT") and len(parts) == 1:
        return name, None
    if name == "RATE" and len(parts) == 2 and parts[1].isdigit():
        return name, parts[1]
    raise ValueError("unknown command " + name)


class CommandReader:
    """Collects host bytes into command lines; an over-long line is dropped whole."""

    def __init__(self):
        self._buf = bytearray()
        self._overflow = False

    def feed(self, data):
        """Return the complete lines (bytes, without line end) that ``data`` finished."""
        lines = []
        for b in data:
            if b in (10, 13):
                if self._buf and not self._overflow:
                    lines.append(bytes(self._buf))
                self._buf = bytearray()
                self._overflow = False
            elif len(self._buf) >= MAX_COMMAND_BYTES:
                self._overflow = True
            else:
                self._buf.append(b)
        return lines


class MillisClock:
    """A 32-bit millisecond counter built from a port's shorter ``ticks_ms`` (2^30 on many).

    ``update(ticks_now, ticks_diff)`` takes the current tick and the port's wrap-aware
    difference function, so it runs on CPython in tests with plain subtraction.
    """

    def __init__(self, ticks_now):
        self._last = ticks_now
        self.ms = 0

    def update(self, ticks_now, ticks_diff):
        self.ms = (self.ms + ticks_diff(ticks_now, self._last)) % T_MS_MODULO
        self._last = ticks_now
        return self.ms


class ReadyWatch:
    """Decides when a board should report that its ADC has stopped converting.

    An HX711 with DOUT unplugged (the pull-up holds it high) or without power never signals
    "data ready", and the board would fall silent with no hint why. ``update`` is called every
    pass of the main loop; it returns True when no conversion has arrived for ``timeout_ms`` and
    the last report is ``repeat_ms`` old, so the host gets one ``#ERR ADC ...`` line per
    ``repeat_ms`` while the fault lasts, not one per loop.
    """

    def __init__(self, ticks_now, timeout_ms=1000, repeat_ms=5000):
        self.timeout_ms = timeout_ms
        self.repeat_ms = repeat_ms
        self._last_sample = ticks_now
        self._last_report = None

    def sample(self, ticks_now):
        """A conversion was read: the ADC is alive; the next fault is reported at once."""
        self._last_sample = ticks_now
        self._last_report = None

    def update(self, ticks_now, ticks_diff):
        if ticks_diff(ticks_now, self._last_sample) < self.timeout_ms:
            return False
        if self._last_report is not None and (
                ticks_diff(ticks_now, self._last_report) < self.repeat_ms):
            return False
        self._last_report = ticks_now
        return True
