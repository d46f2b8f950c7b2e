"""A simulated USB HID scale on the bench: the bench's force as ``(t_s, weight_g, status)`` samples.

The samples feed ``drivers.fake_usb.fake_scale_backend_from_weights``, so the scale is read
through pyusb, ``UsbHidTransport`` and the ``hid_pos`` driver like a real one. Such a scale
exists only inside the Python process that made it: letting another program open it would take
a kernel USB device, which heft does not create. Pure: no clock, no I/O.
"""

from __future__ import annotations

from collections import deque
from typing import Final

from heft.drivers.sim.physics import BenchTimeline, SensorNoise

STABLE_WINDOW_S: Final = 0.5
"""The scale calls a weight stable once every shown value has stayed within one step this long."""


def hid_scale_samples(
    bench: BenchTimeline,
    *,
    until_s: float,
    rate_hz: float = 10.0,
    step_g: float = 0.1,
    channel: int = 0,
    noise: SensorNoise | None = None,
) -> list[tuple[float, float, str]]:
    """What a HID scale under ``channel`` of the bench reports from 0 to ``until_s``.

    Each shown weight is the force rounded to the display step; the status is ``zero`` for a
    stable zero, ``stable`` once the shown value has held within one step for
    ``STABLE_WINDOW_S``, else ``motion`` (a negative or too-large weight is turned into under
    zero / over weight when the report is built).

    Raises:
        ValueError: for a rate, step or horizon that is not positive.
    """
    if not (rate_hz > 0 and step_g > 0 and until_s > 0):
        raise ValueError("rate_hz, step_g and until_s must be > 0")
    keys = list(bench.channels)
    if not 0 <= channel < len(keys):
        raise ValueError(f"channel {channel}: the bench has channels 0..{len(keys) - 1}")
    key = keys[channel]
    window = max(1, round(STABLE_WINDOW_S * rate_hz))
    recent: deque[float] = deque(maxlen=window)
    samples: list[tuple[float, float, str]] = []
    for i in range(int(until_s * rate_hz) + 1):
        t_s = i / rate_hz
        force_g = bench.forces_at(t_s)[key] + (noise.sample_g(t_s) if noise else 0.0)
        shown_g = round(force_g / step_g) * step_g
        recent.append(shown_g)
        settled = len(recent) == window and max(recent) - min(recent) <= step_g * 1.001
        if settled and abs(shown_g) < step_g / 2:
            status = "zero"
        else:
            status = "stable" if settled else "motion"
        samples.append((t_s, shown_g, status))
    return samples
