"""The settling model's fit against the textbook free response of an under-damped oscillator.

Check values: x(t) = c + A exp(-zeta omega_n t) cos(omega_d t), omega_d = omega_n sqrt(1 - zeta^2)
(free response of a second-order system, any vibrations textbook, e.g. Thomson and Dahleh,
"Theory of Vibration with Applications", ch. 2). The fit must recover c, the damped frequency and
the decay rate, and its stated standard uncertainty must cover the true c as often as a standard
uncertainty should (about 95 % within 2u for Gaussian noise: JCGM 100, G.3).
"""

from __future__ import annotations

import math
import random

import pytest

from heft.daemon.settling import MIN_SAMPLES, fit_damped_oscillation


def _ringing(c: float, amplitude: float, zeta: float, f_n_hz: float, rate_hz: float,
             span_s: float, noise: float, rng: random.Random) -> tuple[list[float], list[float]]:
    omega_n = 2 * math.pi * f_n_hz
    omega_d = omega_n * math.sqrt(1 - zeta**2)
    ts = [0.1 + k / rate_hz for k in range(int(span_s * rate_hz))]
    ys = [c + amplitude * math.exp(-zeta * omega_n * t) * math.cos(omega_d * t)
          + rng.gauss(0.0, noise) for t in ts]  # fmt: skip
    return ts, ys


@pytest.mark.parametrize(("zeta", "f_n_hz"), [(0.05, 2.5), (0.15, 3.2), (0.45, 5.0)])
def test_recovers_the_textbook_parameters(zeta: float, f_n_hz: float) -> None:
    ts, ys = _ringing(250.0, 40.0, zeta, f_n_hz, 80.0, 1.0, 0.0, random.Random(0))
    fit = fit_damped_oscillation(ts, ys)
    assert fit is not None
    assert fit.equilibrium == pytest.approx(250.0, abs=1e-6)
    assert fit.frequency_hz == pytest.approx(f_n_hz * math.sqrt(1 - zeta**2), rel=1e-6)
    assert fit.decay_per_s == pytest.approx(zeta * 2 * math.pi * f_n_hz, rel=1e-6)


def test_equilibrium_is_known_while_the_ringing_is_still_large() -> None:
    # one and a half cycles at 3 Hz: the oscillation is still tens of grams, c within 0.1 g
    ts, ys = _ringing(320.0, 60.0, 0.1, 3.0, 80.0, 0.5, 0.15, random.Random(4))
    fit = fit_damped_oscillation(ts, ys)
    assert fit is not None and fit.amplitude_now > 10.0
    assert abs(fit.equilibrium - 320.0) < 0.1
    assert fit.equilibrium_u < 0.1


def test_stated_uncertainty_covers_the_truth_as_it_should() -> None:
    rng = random.Random(2026)
    trials, within = 200, 0
    for _ in range(trials):
        ts, ys = _ringing(180.0, 30.0, 0.12, 3.5, 80.0, 0.6, 0.15, rng)
        fit = fit_damped_oscillation(ts, ys)
        assert fit is not None
        within += abs(fit.equilibrium - 180.0) <= 2 * fit.equilibrium_u
    # 95 % expected; 200 trials put the count within about +/-3 %
    assert 0.89 <= within / trials <= 0.995, within


def test_too_few_readings_give_no_fit() -> None:
    ts, ys = _ringing(100.0, 10.0, 0.1, 3.0, 80.0, 0.08, 0.0, random.Random(1))
    assert len(ts) < MIN_SAMPLES
    assert fit_damped_oscillation(ts, ys) is None
    assert fit_damped_oscillation([0.0] * 10, [1.0] * 10) is None  # no time span
