"""Board wiring. Edit the pins for your board; everything else reads from here.

Defaults suit a Raspberry Pi Pico (RP2040); for an ESP32 DevKit use e.g. DOUT 16/17, SCK 4,
RATE 5 (avoid strapping pins 0, 2, 12, 15 and input-only 34-39 for SCK/RATE).
"""

FIRMWARE_ID = "hb-mpy-1.0"

# One entry per load cell: (DOUT pin, PD_SCK pin). Two cells may share one SCK pin.
CHANNELS = [(2, 3), (4, 3)]

# GPIO wired to every HX711's RATE pin, or None if RATE is strapped (then !RATE is refused).
RATE_PIN = 5
DEFAULT_RATE_HZ = 10
GAIN = 128
