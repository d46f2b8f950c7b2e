"""The equilibrium of a ringing load, predicted from its settling transient (pure, no I/O).

A club laid on a support makes the reading ring about its static value like any under-damped
second-order system (textbook free response):

    y(t) = c + exp(-sigma * tau) * (a * cos(omega * tau) + b * sin(omega * tau)),  tau = t - t0

``c`` is the static force the capture wants. Fitting the model to the readings since the ringing
began gives ``c`` long before the oscillation has died below the display step, with a standard
uncertainty that includes the fit's own (the covariance of the least-squares estimate,
s^2 (J^T J)^-1, as for any non-linear regression: e.g. Seber and Wild, "Nonlinear Regression",
Wiley 1989, ch. 2; JCGM 100 (GUM) 4.2 for a Type A evaluation).

The fit is a variable projection: for a grid of (sigma, omega) the model is linear in (c, a, b)
and solved exactly; the best grid point then starts a Levenberg-Marquardt refinement of all five
parameters (Levenberg 1944, Marquardt 1963). The caller decides whether the fit is good enough
(its residual against the channel's noise, the uncertainty against the resolution it needs).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Final

import numpy as np
import numpy.typing as npt

FloatArray = npt.NDArray[np.float64]

MIN_SAMPLES: Final = 8  # five parameters and a few degrees of freedom for the residual
_SIGMA_GRID_PER_S: Final = (0.0, 0.5, 1.0, 2.0, 3.5, 6.0, 10.0, 16.0, 25.0)
_OMEGA_STEPS: Final = 48
_LM_ITERATIONS: Final = 30


@dataclass(frozen=True, slots=True, kw_only=True)
class DampedFit:
    """The fitted transient; ``equilibrium_u`` is a standard uncertainty (k = 1)."""

    equilibrium: float
    equilibrium_u: float
    amplitude_now: float  # envelope of the oscillation at the last sample
    oscillation_rms: float  # RMS of the fitted oscillation over the window (its size)
    frequency_hz: float
    decay_per_s: float
    residual_rms: float
    samples: int


def _basis(tau: FloatArray, sigma: FloatArray, omega: FloatArray) -> tuple[FloatArray, FloatArray]:
    envelope = np.exp(-np.multiply.outer(sigma, tau))
    phase = np.multiply.outer(omega, tau)
    return envelope * np.cos(phase), envelope * np.sin(phase)


def _grid_start(tau: FloatArray, y: FloatArray, omega_lo: float, omega_hi: float) -> FloatArray:
    """(c, a, b, sigma, omega) at the best point of the (sigma, omega) grid (exact linear LS)."""
    sigmas = np.repeat(np.asarray(_SIGMA_GRID_PER_S), _OMEGA_STEPS)
    omegas = np.tile(np.linspace(omega_lo, omega_hi, _OMEGA_STEPS), len(_SIGMA_GRID_PER_S))
    cos_part, sin_part = _basis(tau, sigmas, omegas)
    ones = np.ones_like(cos_part)
    design = np.stack((ones, cos_part, sin_part), axis=-1)  # (grid, n, 3)
    gram = np.einsum("gni,gnj->gij", design, design)
    rhs = np.einsum("gni,n->gi", design, y)
    gram += np.eye(3) * 1e-12 * np.trace(gram, axis1=1, axis2=2)[:, None, None]
    beta = np.linalg.solve(gram, rhs[..., None])[..., 0]
    residual = y - np.einsum("gni,gi->gn", design, beta)
    rss = np.einsum("gn,gn->g", residual, residual)
    best = int(np.argmin(rss))
    c, a, b = beta[best]
    return np.array([c, a, b, sigmas[best], omegas[best]])


def _model_and_jacobian(p: FloatArray, tau: FloatArray) -> tuple[FloatArray, FloatArray]:
    c, a, b, sigma, omega = p
    envelope = np.exp(-sigma * tau)
    cos_t, sin_t = np.cos(omega * tau), np.sin(omega * tau)
    oscillation = envelope * (a * cos_t + b * sin_t)
    jac = np.empty((tau.size, 5))
    jac[:, 0] = 1.0
    jac[:, 1] = envelope * cos_t
    jac[:, 2] = envelope * sin_t
    jac[:, 3] = -tau * oscillation
    jac[:, 4] = tau * envelope * (-a * sin_t + b * cos_t)
    return c + oscillation, jac


def _refine(p: FloatArray, tau: FloatArray, y: FloatArray) -> FloatArray:
    """Levenberg-Marquardt from the grid's start (a few iterations suffice from there)."""
    damping = 1e-3
    model, jac = _model_and_jacobian(p, tau)
    rss = float(np.sum((y - model) ** 2))
    for _ in range(_LM_ITERATIONS):
        residual = y - model
        jtj = jac.T @ jac
        step = np.linalg.solve(jtj + damping * np.diag(np.diag(jtj) + 1e-12), jac.T @ residual)
        trial = p + step
        trial[3] = max(trial[3], 0.0)  # a transient that grows is not a club settling
        trial_model, trial_jac = _model_and_jacobian(trial, tau)
        trial_rss = float(np.sum((y - trial_model) ** 2))
        if trial_rss < rss:
            improved = rss - trial_rss
            p, model, jac, rss = trial, trial_model, trial_jac, trial_rss
            damping = max(damping / 3.0, 1e-9)
            if improved <= 1e-12 * max(rss, 1e-30):
                break
        else:
            damping *= 4.0
            if damping > 1e8:
                break
    return p


def fit_damped_oscillation(
    times_s: Sequence[float],
    values: Sequence[float],
    *,
    frequency_range_hz: tuple[float, float] = (1.0, 12.0),
) -> DampedFit | None:
    """Fit the settling model to readings; None when there are too few or the fit is singular.

    ``frequency_range_hz`` bounds the start grid (a bench beam rings at a few hertz). The
    returned uncertainty is the fit's alone: the caller adds what the readings' own resolution
    and calibration contribute.
    """
    n = len(times_s)
    if n < MIN_SAMPLES or n != len(values):
        return None
    t = np.asarray(times_s, dtype=np.float64)
    y = np.asarray(values, dtype=np.float64)
    tau = t - t[0]
    span_s = float(tau[-1])
    if span_s <= 0:
        return None
    nyquist = 0.5 * (n - 1) / span_s
    omega_hi = 2 * math.pi * min(frequency_range_hz[1], 0.9 * nyquist)
    omega_lo = 2 * math.pi * frequency_range_hz[0]
    if omega_hi <= omega_lo:
        return None
    p = _refine(_grid_start(tau, y, omega_lo, omega_hi), tau, y)
    model, jac = _model_and_jacobian(p, tau)
    residual = y - model
    dof = n - 5
    s2 = float(residual @ residual) / dof
    try:
        covariance = s2 * np.linalg.inv(jac.T @ jac)
    except np.linalg.LinAlgError:
        return None
    variance_c = float(covariance[0, 0])
    if not math.isfinite(variance_c) or variance_c < 0:
        return None
    c, a, b, sigma, omega = (float(x) for x in p)
    return DampedFit(
        equilibrium=c,
        equilibrium_u=math.sqrt(variance_c),
        amplitude_now=math.hypot(a, b) * math.exp(-sigma * span_s),
        oscillation_rms=float(np.sqrt(np.mean((model - c) ** 2))),
        frequency_hz=omega / (2 * math.pi),
        decay_per_s=sigma,
        residual_rms=math.sqrt(s2),
        samples=n,
    )
