"""Is a window of readings still enough to zero, tare or calibrate on? (pure)

Weighing practice takes a zero or a result only at stable equilibrium: within ±1 d for at least
0.4 s (OIML R 76-1 4.4.2). The capture engine applies that to clubs; zero, tare, span and verify
average a fixed window instead, so they check the window afterwards:

* When the window is in grams (a calibrated channel, a gram scale), its standard deviation must
  be within ``max(STILL_NOISE_MULTIPLE x noise, 1 d)``: a still load scatters only by the
  channel's noise, and a reading toggling between neighbouring steps is still within ±1 d.
* When grams are not known yet (the first zero or span of a load-cell channel, in raw counts),
  the window's scatter is compared with its own sample-to-sample noise (von Neumann's mean square
  successive difference, Ann. Math. Statist. 12 (1941) 367): for white noise the two agree; a
  load lifted, set down or swinging during the window spreads the values far more than it moves
  them between neighbouring samples.
"""

from __future__ import annotations

import itertools
import math
import statistics
from collections.abc import Sequence
from dataclasses import dataclass

# A still window's stdev may be up to this many times the channel's noise (rms). Three sigma:
# common practice, no source.
STILL_NOISE_MULTIPLE = 3.0
# A raw window whose stdev exceeds its sample-to-sample noise this many times is moving. Under
# white noise the ratio is 1 with a spread of about 1/sqrt(n) (derived from von Neumann's
# moments); 2 leaves a wide margin at 10 samples/s and still catches any real motion.
MOTION_RATIO_LIMIT = 2.0


@dataclass(frozen=True, slots=True)
class Scatter:
    """Spread of a window of readings, in the readings' own unit."""

    n: int
    stdev: float
    step_noise: float  # sqrt(MSSD / 2): the noise seen between neighbouring samples

    @classmethod
    def of(cls, values: Sequence[float]) -> Scatter:
        n = len(values)
        if n < 2:
            return cls(n, 0.0, 0.0)
        mssd = sum((b - a) ** 2 for a, b in itertools.pairwise(values)) / (n - 1)
        return cls(n, statistics.stdev(values), math.sqrt(mssd / 2.0))

    @property
    def motion_ratio(self) -> float:
        """stdev / sample-to-sample noise: about 1 when still, much more when moving."""
        if self.stdev == 0:
            return 0.0
        return self.stdev / self.step_noise if self.step_noise > 0 else math.inf


def still_limit_g(noise_g: float, division_g: float) -> float:
    """Largest stdev of a still window: a few times the noise, never below 1 d."""
    return max(STILL_NOISE_MULTIPLE * noise_g, division_g)


def motion(
    values: Sequence[float],
    *,
    units_per_g: float | None,
    noise_g: float,
    division_g: float,
) -> str | None:
    """Why the window is not still (e.g. ``'151 g scatter'``), or None when it is still.

    Args:
        values: The window's readings, oldest first.
        units_per_g: Readings per gram (1 for grams, counts_per_g for raw counts); None when
            not known, and then the scale-free check is used.
        noise_g: The channel's reading noise (rms), g.
        division_g: The channel's display step d, g.
    """
    s = Scatter.of(values)
    if units_per_g is not None and units_per_g != 0:
        scatter_g = s.stdev / abs(units_per_g)
        limit_g = still_limit_g(noise_g, division_g)
        if scatter_g > limit_g:
            return f"{scatter_g:.3g} g scatter (still is within {limit_g:.2g} g)"
        return None
    if s.motion_ratio > MOTION_RATIO_LIMIT:
        return (
            f"{s.stdev:.0f} counts scatter, {s.motion_ratio:.3g} times its "
            "sample-to-sample noise"
        )
    return None
