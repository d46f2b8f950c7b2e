"""heft beam reference firmware (MicroPython, RP2040 or ESP32, one or two HX711).

Speaks heft-beam/1 over the board's USB serial console: a HELLO at boot, one sample line per
conversion, and the commands !ID, !RATE <hz>, !REBOOT (docs/protocols.md section e). Copy
framing.py, hx711.py, config.py and main.py to the board (e.g. ``mpremote cp``).
"""

import sys
import time

import machine
import select
import ubinascii

import config
import framing
from hx711 import ADC_BITS, HX711Bank


def serial_number():
    return ubinascii.hexlify(machine.unique_id()).decode()


class Beam:
    def __init__(self):
        self.bank = HX711Bank(config.DOUT_PINS, config.SCK_PIN, gain=config.GAIN,
                              rate_pin=config.RATE_PIN)
        self.rate_hz = config.DEFAULT_RATE_HZ
        self.bank.set_rate(self.rate_hz)
        self.seq = 0
        self.clock = framing.MillisClock(time.ticks_ms())
        self.sn = serial_number()
        self.out = sys.stdout.buffer if hasattr(sys.stdout, "buffer") else sys.stdout
        self.inp = sys.stdin.buffer if hasattr(sys.stdin, "buffer") else sys.stdin
        self.poll = select.poll()
        self.poll.register(sys.stdin, select.POLLIN)
        self.commands = framing.CommandReader()
        self.watch = framing.ReadyWatch(time.ticks_ms())
        # The gain/channel pulses after a read choose the NEXT conversion; the first one after
        # power-up is always channel A, gain 128, so drop it when another gain is configured.
        self.skip = 0 if config.GAIN == 128 else 1

    def send(self, line):
        self.out.write(line)

    def hello(self):
        self.send(framing.hello_line(config.FIRMWARE_ID, len(config.DOUT_PINS), self.rate_hz,
                                     ADC_BITS, self.sn))

    def handle(self, line):
        try:
            name, arg = framing.parse_command(line)
        except ValueError as err:
            self.send(framing.err_line(str(err)))
            return
        if name == "ID":
            self.send(framing.ok_line("ID"))
            self.hello()
        elif name == "RATE":
            hz = int(arg)
            if self.bank.set_rate(hz):
                self.rate_hz = hz
                self.send(framing.ok_line("RATE %d" % hz))
                self.hello()
            else:
                self.send(framing.err_line("RATE %d not possible (10 or 80, RATE pin wired)" % hz))
        elif name == "REBOOT":
            self.send(framing.ok_line("REBOOT"))
            time.sleep_ms(50)  # let the reply leave the USB buffer
            machine.reset()

    def read_host(self):
        while self.poll.poll(0):
            data = self.inp.read(1)
            if not data:
                return
            for line in self.commands.feed(data):
                self.handle(line)

    def run(self):
        self.hello()
        while True:
            self.read_host()
            now = time.ticks_ms()
            if self.bank.ready():
                counts = self.bank.read()
                self.watch.sample(now)
                if self.skip:
                    self.skip -= 1
                    continue
                t_ms = self.clock.update(now, time.ticks_diff)
                self.send(framing.sample_line(self.seq, t_ms, counts))
                self.seq = (self.seq + 1) % framing.SEQ_MODULO
            else:
                if self.watch.update(now, time.ticks_diff):
                    # No conversion for a second (a 10 Hz HX711 converts every 100 ms):
                    # DT or SCK unwired, or the module unpowered. Say so instead of going quiet.
                    self.send(framing.err_line(
                        "ADC not ready ch=%s: check HX711 power, DT and SCK wiring"
                        % ",".join("%d" % i for i in self.bank.not_ready())))
                time.sleep_ms(1)


Beam().run()
