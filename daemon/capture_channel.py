"""One channel's samples inside the capture engine: running sums for O(1) straight-line fits.

The engine (heft.daemon.capture) keeps one :class:`ChannelSamples` per channel and asks it for
least-squares fits over any range of recent samples; the chi-square bound it tests the scatter
against is here too.
"""

from __future__ import annotations

import bisect
import math
from collections import deque
from dataclasses import dataclass
from functools import lru_cache
from statistics import NormalDist, median

from heft.daemon.capture_params import CaptureParams
from heft.drivers.reading import Flag

NOISE_ESTIMATES = 9  # the noise estimate is the median of this many recent empty windows
_REBASE_EVERY = 20_000  # samples between re-centring the running sums (keeps them precise)

@lru_cache(maxsize=8192)
def chi2_quantile_ratio(dof: int, confidence: float) -> float:
    """Upper quantile of chi-square with ``dof`` degrees of freedom, divided by ``dof``.

    Wilson-Hilferty cube-root normal approximation (Wilson & Hilferty 1931; within about 3 %
    of the tabulated values for dof >= 1 at the confidences used here).
    """
    z = NormalDist().inv_cdf(confidence)
    h = 2.0 / (9.0 * dof)
    return float((1.0 - h + z * math.sqrt(h)) ** 3)


@dataclass(frozen=True, slots=True)
class LineFit:
    n: int
    mean: float  # raw grams
    slope_g_per_s: float
    resid_var: float  # about the fitted line, dof n - 2
    var: float  # about the mean, dof n - 1


@dataclass(frozen=True, slots=True)
class StableWindow:
    first: int
    last: int
    fit: LineFit
    t_start_s: float
    t_end_s: float
    cover_start_s: float  # earliest time the window speaks for (t_start, unless a device vouches)


# --- one channel ---------------------------------------------------------------------------


class ChannelSamples:
    """Samples of one channel with running sums for O(1) line fits over any index range."""

    def __init__(self, name: str, params: CaptureParams) -> None:
        self.name = name
        self.d_g = params.division_for(name)
        self.limit_g = params.overload_limit_for(name)
        self.noise_prior_g = params.noise_for(name)
        self.flag_mode = params.device_flags_for(name)
        self.keep_s = max(params.max_window_s, params.zero_tracking_window_s) + 1.0
        self.t: list[float] = []
        self.x: list[float] = []
        self.flags: list[Flag] = []
        # cum[k] = (sum t', sum t'^2, sum x', sum x'^2, sum t'x') over samples 0..k-1
        self.cum: list[tuple[float, float, float, float, float]] = [(0.0, 0.0, 0.0, 0.0, 0.0)]
        self.t_ref = 0.0
        self.x_ref = 0.0
        self.head = 0  # first sample still kept
        self.since_rebase = 0
        self.window_from = 0  # first sample a window may start at
        self.stable_run_from = 0  # first of the current run of device-STABLE samples
        self.last_t: float | None = None
        self.latest_net_g = 0.0  # what the load check sees
        self.overloaded = False
        self.offset_g = 0.0
        self.zero_last_s: float | None = None
        self.noise_from = 0
        self.noise_estimates: deque[float] = deque(maxlen=NOISE_ESTIMATES)
        self.result: StableWindow | None = None

    # storage
    def append(self, t_s: float, value_g: float, flags: Flag) -> None:
        if not self.t:
            self.t_ref, self.x_ref = t_s, value_g
        self._push_sums(t_s, value_g)
        self.t.append(t_s)
        self.x.append(value_g)
        self.flags.append(flags)
        if not flags & Flag.STABLE:
            self.stable_run_from = len(self.t)
        self._trim(t_s)

    def _trim(self, now_s: float) -> None:
        h = bisect.bisect_left(self.t, now_s - self.keep_s, self.head)
        self.head = h
        self.since_rebase += 1
        if self.since_rebase >= _REBASE_EVERY or (h > 1024 and h > len(self.t) // 2):
            self._compact()

    def _compact(self) -> None:
        h = self.head
        del self.t[:h], self.x[:h], self.flags[:h]
        self.window_from = max(0, self.window_from - h)
        self.stable_run_from = max(0, self.stable_run_from - h)
        self.noise_from = max(0, self.noise_from - h)
        self.head = 0
        self.since_rebase = 0
        self.result = None
        self.t_ref = self.t[0] if self.t else 0.0
        self.x_ref = self.x[0] if self.x else 0.0
        self.cum = [(0.0, 0.0, 0.0, 0.0, 0.0)]
        for t, x in zip(self.t, self.x, strict=True):
            self._push_sums(t, x)

    def _push_sums(self, t_s: float, value_g: float) -> None:
        tp, xp = t_s - self.t_ref, value_g - self.x_ref
        c = self.cum[-1]
        self.cum.append((c[0] + tp, c[1] + tp * tp, c[2] + xp, c[3] + xp * xp, c[4] + tp * xp))

    def restart_windows(self) -> None:
        """No window may reach back before the next sample (gap, overload, state change)."""
        self.window_from = len(self.t)
        self.noise_from = len(self.t)
        self.result = None

    @property
    def noise_g(self) -> float:
        if len(self.noise_estimates) >= 3:
            return median(self.noise_estimates)
        return self.noise_prior_g

    def fit(self, i: int, j: int) -> LineFit:
        """Least-squares line through samples i..j (inclusive) from the running sums."""
        a, b = self.cum[i], self.cum[j + 1]
        n = j - i + 1
        st, stt, sx, sxx, stx = (b[k] - a[k] for k in range(5))
        mt, mx = st / n, sx / n
        ctt = stt - st * mt
        cxx = max(sxx - sx * mx, 0.0)
        ctx = stx - st * mx
        slope = ctx / ctt if ctt > 1e-15 else 0.0
        ssr = max(cxx - slope * ctx, 0.0)
        return LineFit(
            n=n,
            mean=self.x_ref + mx,
            slope_g_per_s=slope,
            resid_var=ssr / (n - 2) if n > 2 else 0.0,
            var=cxx / (n - 1) if n > 1 else 0.0,
        )
