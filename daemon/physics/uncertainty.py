"""First-order uncertainty propagation after the GUM (JCGM 100:2008), for independent inputs.

Every ``u`` here is a STANDARD uncertainty (one standard deviation); :func:`expanded` turns it
into the expanded uncertainty U = k*u that results report (k = 2).
"""

from __future__ import annotations

import math
import sys
from collections.abc import Callable, Iterable, Mapping
from dataclasses import dataclass

COVERAGE_FACTOR_K = 2.0
# Central-difference step as a fraction of each input's own standard uncertainty: small enough
# that curvature does not leak into the slope. The floor, relative to the input's size, keeps a
# tiny u (down to denormals) from drowning the slope in rounding noise.
_STEP_PER_U = 1e-3
_MIN_STEP_PER_VALUE = 1e-8
_MIN_STEP = 1e-12
# Rounding allowance of a central difference, in units of the result's last place: a few
# operations inside ``func`` each round once (generous, so noise never passes for a slope).
_ROUNDING_ULPS = 64


def _step(x: UncertainValue) -> float:
    return max(x.u * _STEP_PER_U, abs(x.value) * _MIN_STEP_PER_VALUE, _MIN_STEP)


@dataclass(frozen=True)
class UncertainValue:
    """A value with its standard uncertainty (same unit as the value)."""

    value: float
    u: float = 0.0

    def __post_init__(self) -> None:
        if not math.isfinite(self.value):
            raise ValueError(f"value must be a finite number, not {self.value!r}")
        if not math.isfinite(self.u) or self.u < 0:
            raise ValueError(f"standard uncertainty must be finite and >= 0, not {self.u!r}")

    @property
    def has_u(self) -> bool:
        return self.u > 0


def resolution_u(step: float) -> float:
    """Standard uncertainty of one reading from a display step d: d/sqrt(12) (GUM F.2.2.1)."""
    if step < 0:
        raise ValueError(f"display step must be >= 0, not {step}")
    return step / math.sqrt(12.0)


def net_resolution_u(step: float) -> float:
    """A net reading (load minus zero, each rounded to d): d/sqrt(6) (GUM, two resolutions)."""
    return math.sqrt(2.0) * resolution_u(step)


def repeatability_u(samples: Iterable[float]) -> float:
    """Type A standard uncertainty of the mean of repeated readings: s/sqrt(n) (GUM 4.2.3)."""
    data = list(samples)
    if len(data) < 2:
        raise ValueError("repeatability needs at least two readings")
    import statistics  # here, not at the top: it costs ``heft calc`` ~5 ms of start-up

    return statistics.stdev(data) / math.sqrt(len(data))


def combine_u(*components: float) -> float:
    """Root sum of squares of independent standard uncertainties."""
    return math.sqrt(math.fsum(c * c for c in components))


def expanded(u: float, k: float = COVERAGE_FACTOR_K) -> float:
    """Expanded uncertainty U = k*u."""
    return k * u


def _central_difference(
    func: Callable[..., float], values: Mapping[str, float], name: str, step: float
) -> tuple[float, float]:
    """(slope, the most rounding alone could put into that slope)."""
    up = dict(values)
    down = dict(values)
    up[name] = values[name] + step
    down[name] = values[name] - step
    f_up, f_down = float(func(**up)), float(func(**down))
    noise = _ROUNDING_ULPS * sys.float_info.epsilon * max(abs(f_up), abs(f_down))
    return (f_up - f_down) / (2.0 * step), noise / (2.0 * step)


def sensitivity(
    func: Callable[..., float], values: Mapping[str, float], name: str, step: float
) -> float:
    """df/d(name) at ``values`` by a central difference of half-width ``step``."""
    return _central_difference(func, values, name, step)[0]


def propagate(func: Callable[..., float], inputs: Mapping[str, UncertainValue]) -> UncertainValue:
    """y = func(**values) with u_c(y)^2 = sum (df/dx_i)^2 u(x_i)^2 (GUM eq. 10, independent inputs).

    Sensitivity coefficients come from central differences with a step of 1e-3 of each input's
    own standard uncertainty (never below 1e-8 of its value). Inputs with u = 0 contribute
    nothing and are not perturbed. A slope no larger than what float rounding alone could
    produce counts as zero: ``y`` does not depend on that input (W does not move a balance
    point read on a knife edge), so a result with ``u == 0`` depends on no uncertain input.
    """
    values = {name: x.value for name, x in inputs.items()}
    y = float(func(**values))
    terms = []
    for name, x in inputs.items():
        if x.u > 0:
            c, noise = _central_difference(func, values, name, _step(x))
            if abs(c) > noise:
                terms.append(c * x.u)
    return UncertainValue(y, combine_u(*terms))


def any_uncertain(inputs: Iterable[UncertainValue]) -> bool:
    """True when at least one input carries an uncertainty."""
    return any(x.has_u for x in inputs)
