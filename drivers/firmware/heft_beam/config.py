"""Board wiring. Edit the pins for your board; everything else reads from here.

Defaults suit a Raspberry Pi Pico (RP2040). For an ESP32 DevKit use e.g. DOUT 16 and 17, SCK 4,
RATE 5 (avoid the strapping pins 0, 2, 12, 15, and the input-only pins 34-39 for SCK and RATE).
"""

FIRMWARE_ID = "hb-mpy-1.0"

# One DOUT pin per load cell (channel 0, channel 1); all HX711 boards share one PD_SCK pin.
DOUT_PINS = [2, 4]
SCK_PIN = 3

# GPIO wired to every HX711's RATE pin, or None if RATE is strapped (then !RATE is refused).
RATE_PIN = 5
DEFAULT_RATE_HZ = 10
GAIN = 128
