"""Bit-banged HX711 reader for MicroPython (RP2040, ESP32).

The HX711 signals a finished conversion by pulling DOUT low; the host then clocks the 24 data
bits out on PD_SCK, MSB first (each bit is valid after a rising edge), and 1-3 extra pulses
select the next conversion's input and gain: 25 pulses channel A gain 128, 26 channel B gain 32,
27 channel A gain 64 (HX711 datasheet). PD_SCK held high for more than 60 us powers the chip
down, so the clocking runs with interrupts off.

``HX711Bank`` drives one or more HX711 on one shared PD_SCK pin: every clock pulse shifts all
of them, so they are read together (and their samples belong to the same instant). Rate (10 or
80 samples/s) is set by the chips' RATE pin, wired to a GPIO or strapped.
"""

import machine

from framing import from_twos_complement

GAIN_PULSES = {128: 1, 32: 2, 64: 3}  # pulses after the 24 data bits
ADC_BITS = 24


class HX711Bank:
    def __init__(self, dout_pins, sck_pin, gain=128, rate_pin=None):
        if gain not in GAIN_PULSES:
            raise ValueError("gain must be 128, 64 (channel A) or 32 (channel B)")
        if not dout_pins:
            raise ValueError("at least one DOUT pin")
        self.douts = [machine.Pin(p, machine.Pin.IN, machine.Pin.PULL_UP) for p in dout_pins]
        self.sck = machine.Pin(sck_pin, machine.Pin.OUT, value=0)
        self.rate_pin = None if rate_pin is None else machine.Pin(rate_pin, machine.Pin.OUT)
        self.extra = GAIN_PULSES[gain]

    def ready(self):
        """True when every chip has a conversion waiting (all DOUT low)."""
        for dout in self.douts:
            if dout.value():
                return False
        return True

    def not_ready(self):
        """Channels whose DOUT is still high (for the "ADC not ready" report)."""
        return [i for i, dout in enumerate(self.douts) if dout.value()]

    def read(self):
        """One signed 24-bit conversion per chip; call only when ``ready()``."""
        raws = [0] * len(self.douts)
        sck, douts = self.sck, self.douts
        n = len(douts)
        state = machine.disable_irq()
        try:
            for _ in range(ADC_BITS):
                sck.value(1)
                sck.value(0)
                for i in range(n):
                    raws[i] = (raws[i] << 1) | douts[i].value()
            for _ in range(self.extra):
                sck.value(1)
                sck.value(0)
        finally:
            machine.enable_irq(state)
        return [from_twos_complement(r, ADC_BITS) for r in raws]

    def set_rate(self, hz):
        """True if the RATE pin is wired and ``hz`` is one the chip has (10 or 80)."""
        if self.rate_pin is None or hz not in (10, 80):
            return False
        self.rate_pin.value(1 if hz == 80 else 0)
        return True

    def power_down(self):
        self.sck.value(1)  # > 60 us high: the chips sleep until SCK goes low again
