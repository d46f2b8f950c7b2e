"""Bit-banged HX711 reader for MicroPython (RP2040, ESP32).

The HX711 signals a ready conversion by pulling DOUT low; the host then clocks 24 data bits out
on PD_SCK (MSB first) and 1-3 extra pulses select the next conversion's input and gain:
25 pulses channel A gain 128, 26 channel B gain 32, 27 channel A gain 64 (HX711 datasheet).
PD_SCK held high for more than 60 us powers the chip down, so the clocking runs with interrupts
off. Rate (10 or 80 samples/s) is set by the chip's RATE pin, wired to a GPIO or strapped.
"""

import machine

from framing import from_twos_complement

GAIN_PULSES = {128: 1, 32: 2, 64: 3}  # pulses after the 24 data bits
ADC_BITS = 24


class HX711:
    def __init__(self, dout_pin, sck_pin, gain=128, rate_pin=None):
        if gain not in GAIN_PULSES:
            raise ValueError("gain must be 128, 64 (channel A) or 32 (channel B)")
        self.dout = machine.Pin(dout_pin, machine.Pin.IN, machine.Pin.PULL_UP)
        self.sck = machine.Pin(sck_pin, machine.Pin.OUT, value=0)
        self.rate_pin = None if rate_pin is None else machine.Pin(rate_pin, machine.Pin.OUT)
        self.extra = GAIN_PULSES[gain]

    def ready(self):
        return self.dout.value() == 0

    def read(self):
        """One signed 24-bit conversion; call only when ``ready()``."""
        raw = 0
        sck, dout = self.sck, self.dout
        state = machine.disable_irq()
        try:
            for _ in range(ADC_BITS):
                sck.value(1)
                sck.value(0)
                raw = (raw << 1) | dout.value()
            for _ in range(self.extra):
                sck.value(1)
                sck.value(0)
        finally:
            machine.enable_irq(state)
        return from_twos_complement(raw, ADC_BITS)

    def set_rate(self, hz):
        """True if the rate pin is wired and ``hz`` is one the chip has (10 or 80)."""
        if self.rate_pin is None or hz not in (10, 80):
            return False
        self.rate_pin.value(1 if hz == 80 else 0)
        return True

    def power_down(self):
        self.sck.value(1)  # > 60 us high: the chip sleeps until SCK goes low again
