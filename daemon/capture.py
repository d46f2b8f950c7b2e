"""The capture engine: from per-channel readings to one capture per placement.

Pure and clock-injectable: no asyncio, no I/O, no clock of its own. The live service and
``heft replay`` feed it the same way, with the time each reading arrived::

    engine = CaptureEngine(["beam/0", "beam/1"], params)
    for out in engine.on_sample("beam/0", t_s, value_g, flags):
        ...  # StateChanged, Captured, Warning, ZeroTracked
    engine.tick(now_s)  # when no samples come: timeouts

States: EMPTY -> (load above the placement threshold) SETTLING -> (every channel stable, their
windows overlapping) CAPTURED -> HOLDING -> (load below the empty threshold) EMPTY. SETTLING turns
UNSETTLED after ``settle_timeout_s``; a channel that stops delivering puts the engine OFFLINE.

Stability, per channel, is decided on a window of recent samples ending at the newest one. A
straight line is fitted to the window (least squares, from running sums, so each test costs O(1));
the window is stable when

* the fitted trend changes by at most ``max_drift_d`` d across the window (+/-1 d, OIML R 76-1
  4.4.2),
* the scatter about the line is what the channel's noise explains (a chi-square test at
  ``motion_confidence`` against the noise learned while empty): oscillation, bumps and creep show
  up as excess scatter,
* the standard error of the window's mean is at most ``resolution_d`` d, and
* its first and last samples lie at least ``min_stable_s`` apart (0.4 s, OIML R 76-1 4.4.2).

The engine tries windows from the longest (``max_window_s``) to the shortest and keeps the longest
that passes, so a quiet channel is captured as soon as 0.4 s of it is stable, and a noisy one
averages as long as it needs to. Windows of different channels must overlap for ``min_stable_s``:
readings from separate devices arrive at different rates and times.
"""

from __future__ import annotations

import bisect
import math
from collections.abc import Sequence

from heft.daemon.capture_channel import ChannelSamples, StableWindow, chi2_quantile_ratio
from heft.daemon.capture_outputs import (
    Captured,
    CaptureOutput,
    CaptureWarning,
    StateChanged,
    Warning,
    WindowStats,
    ZeroTracked,
)
from heft.daemon.capture_params import CaptureParams
from heft.daemon.events import CaptureState
from heft.drivers.reading import Flag

__all__ = [
    "CaptureEngine",
    "CaptureOutput",
    "CaptureWarning",
    "Captured",
    "StateChanged",
    "Warning",
    "WindowStats",
    "ZeroTracked",
    "chi2_quantile_ratio",
]

_UNUSABLE = Flag.OVERLOAD | Flag.UNDERLOAD | Flag.FAULT
_MAX_CANDIDATES = 24  # window lengths tried per sample: bounds the cost at high sample rates
_ZERO_TRACK_INTERVAL_S = 0.5  # zero-tracking corrections are applied at most this often
_EPS_S = 1e-9


# --- the engine ----------------------------------------------------------------------------


class CaptureEngine:
    """Placement, stability, capture, hold, removal and zero tracking for one station."""

    def __init__(self, channels: Sequence[str], params: CaptureParams) -> None:
        names = list(channels)
        if not names:
            raise ValueError("a capture engine needs at least one channel")
        if len(set(names)) != len(names):
            raise ValueError(f"channel names must be unique, got {names}")
        self.params = params
        self._ch = {n: ChannelSamples(n, params) for n in names}
        self._state = CaptureState.EMPTY
        self._t_placed: float | None = None
        self._t_first: float | None = None  # first time the engine heard of (sample or tick)
        self._offline_since: float | None = None
        self._captured_total_g: float | None = None
        self._warned_unsettled = False
        self._zero_warned: set[str] = set()  # zero_out_of_range active
        self._needs_zero: set[str] = set()  # needs_zero active
        self.dropped_samples = 0  # out-of-order samples ignored

    # --- public views ---
    @property
    def state(self) -> CaptureState:
        return self._state

    @property
    def channels(self) -> tuple[str, ...]:
        return tuple(self._ch)

    @property
    def zero_offsets_g(self) -> dict[str, float]:
        return {n: c.offset_g for n, c in self._ch.items()}

    @property
    def noise_g(self) -> dict[str, float]:
        """Current noise estimate (rms) per channel: learned while empty, else the prior."""
        return {n: c.noise_g for n, c in self._ch.items()}

    def net_g(self) -> dict[str, float]:
        """Latest net value per channel (what the placement check sees)."""
        return {n: c.latest_net_g for n, c in self._ch.items()}

    # --- inputs ---
    def on_sample(
        self, channel: str, t_s: float, value_g: float, flags: Flag = Flag.NONE
    ) -> list[CaptureOutput]:
        """Feed one reading (grams, tared upstream) of ``channel`` that arrived at ``t_s``."""
        ch = self._ch.get(channel)
        if ch is None:
            raise ValueError(f"unknown channel {channel!r}; this engine has {list(self._ch)}")
        if ch.last_t is not None and t_s < ch.last_t:
            self.dropped_samples += 1
            return []
        if self._t_first is None:
            self._t_first = t_s
        out: list[CaptureOutput] = []
        p = self.params
        if ch.last_t is not None and t_s - ch.last_t > p.max_gap_s:
            ch.restart_windows()  # no window spans a gap (or a disconnect)
        ch.last_t = t_s

        if not math.isfinite(value_g):
            flags |= Flag.FAULT
        over = bool(flags & Flag.OVERLOAD) or (math.isfinite(value_g) and value_g > ch.limit_g)
        if over or flags & _UNUSABLE:
            ch.restart_windows()
            ch.stable_run_from = len(ch.t)
            if over:
                ch.latest_net_g = ch.limit_g
                if not ch.overloaded:
                    ch.overloaded = True
                    out.append(
                        Warning(
                            "overload",
                            t_s,
                            f"{channel} reads above capacity + 9 d ({ch.limit_g:g} g): "
                            "not a weight, remove the load",
                            channel,
                        )
                    )
            elif flags & Flag.UNDERLOAD:
                ch.latest_net_g = 0.0
        else:
            if ch.overloaded:
                ch.overloaded = False
                out.append(Warning("overload", t_s, f"{channel} back in range", channel, False))
            ch.append(t_s, value_g, flags)
            ch.latest_net_g = value_g - ch.offset_g

        out.extend(self._advance(ch, t_s))
        return out

    def tick(self, t_s: float) -> list[CaptureOutput]:
        """Let time pass without samples: settle timeout and silent channels."""
        if self._t_first is None:
            self._t_first = t_s
        out: list[CaptureOutput] = []
        if self._state is not CaptureState.OFFLINE:
            silent = [
                c.name
                for c in self._ch.values()
                if t_s - (c.last_t if c.last_t is not None else self._t_first)
                > self.params.channel_timeout_s
            ]
            if silent:
                out.extend(self._go_offline(t_s, silent))
                return out
        out.extend(self._check_timeout(t_s))
        return out

    def rearm(self) -> list[CaptureOutput]:
        """Operator command: allow the club on the supports to be captured again."""
        self._captured_total_g = None
        if self._state in (CaptureState.OFFLINE, CaptureState.EMPTY):
            return []
        t = self._latest_t()
        if self._total_net_g() < self.params.empty_threshold_g:
            return self._set_state(CaptureState.EMPTY, t, "re-armed")
        return self._start_settling(t, "re-armed", after=True)

    def reset_zero(self, channel: str | None = None) -> list[CaptureOutput]:
        """Forget zero tracking (after the service zeroed or tared the channel upstream)."""
        out: list[CaptureOutput] = []
        t = self._latest_t()
        for c in self._ch.values():
            if channel is not None and c.name != channel:
                continue
            if c.offset_g != 0.0:
                c.offset_g = 0.0
                out.append(ZeroTracked(c.name, 0.0, t))
            for kind, active in (
                ("zero_out_of_range", self._zero_warned),
                ("needs_zero", self._needs_zero),
            ):
                if c.name in active:
                    active.discard(c.name)
                    out.append(Warning(kind, t, f"{c.name} zero reset", c.name, False))
            c.zero_last_s = None
        return out

    # --- state machine ---
    def _advance(self, ch: ChannelSamples, t_s: float) -> list[CaptureOutput]:
        p = self.params
        st = self._state
        if st is CaptureState.OFFLINE:
            return self._maybe_back_online(t_s)
        total = self._total_net_g()
        if st is CaptureState.EMPTY:
            if total > p.placement_threshold_g:
                return self._start_settling(t_s, f"load {total:.1f} g")
            return self._empty_housekeeping(ch, t_s)
        if total < p.empty_threshold_g:
            return self._removed(t_s)
        if st in (CaptureState.HOLDING, CaptureState.CAPTURED):
            return []
        # SETTLING or UNSETTLED
        ch.result = self._evaluate(ch)
        if st is CaptureState.SETTLING or p.capture_after_timeout:
            captured = self._try_capture(t_s)
            if captured:
                return captured
        return self._check_timeout(t_s)

    def _set_state(self, state: CaptureState, t_s: float, detail: str) -> list[CaptureOutput]:
        if state is self._state:
            return []
        self._state = state
        return [StateChanged(state, t_s, detail)]

    def _restart_all(self) -> None:
        for c in self._ch.values():
            c.restart_windows()

    def _start_settling(
        self, t_s: float, detail: str, *, after: bool = False
    ) -> list[CaptureOutput]:
        self._t_placed = t_s
        self._warned_unsettled = False
        find = bisect.bisect_right if after else bisect.bisect_left
        for c in self._ch.values():
            # windows start at the first sample at (placement) or after (re-arm) ``t_s``
            c.window_from = find(c.t, t_s, c.head)
            c.result = None
        return self._set_state(CaptureState.SETTLING, t_s, detail)

    def _clear_unsettled(self, t_s: float, why: str) -> list[CaptureOutput]:
        if not self._warned_unsettled:
            return []
        self._warned_unsettled = False
        return [Warning("will_not_settle", t_s, why, "", False)]

    def _removed(self, t_s: float) -> list[CaptureOutput]:
        out = self._clear_unsettled(t_s, "load removed")
        self._captured_total_g = None
        self._t_placed = None
        self._restart_all()
        out.extend(self._set_state(CaptureState.EMPTY, t_s, "removed"))
        return out

    def _check_timeout(self, t_s: float) -> list[CaptureOutput]:
        if self._state is not CaptureState.SETTLING or self._t_placed is None:
            return []
        waited = t_s - self._t_placed
        if waited < self.params.settle_timeout_s:
            return []
        self._warned_unsettled = True
        unsettled = [c.name for c in self._ch.values() if c.result is None]
        msg = (
            f"no stable reading {waited:.1f} s after placement"
            + (f" (still moving: {', '.join(unsettled)})" if unsettled else "")
            + "; steady the bench or the club"
        )
        out: list[CaptureOutput] = [Warning("will_not_settle", t_s, msg)]
        out.extend(self._set_state(CaptureState.UNSETTLED, t_s, msg))
        return out

    def _go_offline(self, t_s: float, silent: list[str]) -> list[CaptureOutput]:
        out = self._clear_unsettled(t_s, "capture abandoned: channel offline")
        self._offline_since = t_s
        self._restart_all()
        detail = f"no samples from {', '.join(silent)} for {self.params.channel_timeout_s:g} s"
        out.extend(self._set_state(CaptureState.OFFLINE, t_s, detail))
        return out

    def _maybe_back_online(self, t_s: float) -> list[CaptureOutput]:
        since = self._offline_since if self._offline_since is not None else t_s
        if any(c.last_t is None or c.last_t <= since for c in self._ch.values()):
            return []
        self._offline_since = None
        self._restart_all()
        total = self._total_net_g()
        p = self.params
        if total <= p.placement_threshold_g:
            self._captured_total_g = None
            return self._set_state(CaptureState.EMPTY, t_s, "channels back")
        held = self._captured_total_g
        if held is not None and abs(total - held) < p.placement_threshold_g:
            return self._set_state(CaptureState.HOLDING, t_s, "channels back, club captured")
        self._captured_total_g = None
        return self._start_settling(t_s, "channels back with a load")

    # --- stability ---
    def _evaluate(self, ch: ChannelSamples) -> StableWindow | None:
        """Longest stable window of ``ch`` ending at its newest sample, or None."""
        if ch.overloaded or not ch.t:
            return None
        j = len(ch.t) - 1
        first = max(ch.window_from, ch.head)
        if j < first:
            return None
        p = self.params
        last_flags = ch.flags[j]
        mode = ch.flag_mode
        if mode == "trust" and last_flags & Flag.STABLE:
            i = max(first, ch.stable_run_from)
            if i <= j:
                f = ch.fit(i, j)
                # the device vouches for its own stable window: it does not limit the overlap
                return StableWindow(i, j, f, ch.t[i], ch.t[j], -math.inf)
        if mode in ("veto", "trust") and last_flags & Flag.MOTION:
            return None
        if mode == "require" and not last_flags & Flag.STABLE:
            return None
        return self._longest_stable(ch, first, j, p.min_stable_s, p.max_window_s)

    def _longest_stable(
        self, ch: ChannelSamples, first: int, j: int, min_cover_s: float, max_cover_s: float
    ) -> StableWindow | None:
        t = ch.t
        # newest start whose window still spans min_cover_s (first to last sample: the
        # conservative reading of "for at least 0.4 s")
        i_short = bisect.bisect_right(t, t[j] - min_cover_s + _EPS_S, first, j + 1) - 1
        if i_short < first:
            return None
        i_long = bisect.bisect_left(t, t[j] - max_cover_s - _EPS_S, first, j + 1)
        i_long = min(i_long, i_short)
        step = max(1, (i_short - i_long) // _MAX_CANDIDATES)
        starts = list(range(i_long, i_short, step))
        starts.append(i_short)
        for i in starts:  # longest first: the first pass is the best-averaged window
            w = self._test(ch, i, j)
            if w is not None:
                return w
        return None

    def _test(self, ch: ChannelSamples, i: int, j: int) -> StableWindow | None:
        p = self.params
        n = j - i + 1
        if n < 3:
            return None
        f = ch.fit(i, j)
        d = ch.d_g
        span_s = ch.t[j] - ch.t[i]
        if abs(f.slope_g_per_s) * span_s > p.max_drift_d * d:
            return None
        noise = ch.noise_g
        # a reading toggling between two neighbouring steps scatters by up to d/2: that is
        # still within +/-1 d, so the motion test never asks for less
        ref = max(noise, 0.5 * d)
        if f.resid_var > ref * ref * chi2_quantile_ratio(n - 2, p.motion_confidence):
            return None
        if max(noise * noise, f.resid_var) / n > (p.resolution_d * d) ** 2:
            return None
        return StableWindow(i, j, f, ch.t[i], ch.t[j], ch.t[i])

    def _try_capture(self, t_s: float) -> list[CaptureOutput]:
        p = self.params
        results: dict[str, StableWindow] = {}
        for c in self._ch.values():
            if c.result is None or c.last_t is None or t_s - c.last_t > p.max_gap_s:
                return []
            results[c.name] = c.result
        start = max(w.cover_start_s for w in results.values())
        end = min(w.t_end_s for w in results.values())
        if end - start < p.min_stable_s - _EPS_S:
            return []
        windows = {
            name: WindowStats(
                mean_g=w.fit.mean - self._ch[name].offset_g,
                stdev_g=math.sqrt(w.fit.var),
                n=w.fit.n,
                t_start_s=w.t_start_s,
                t_end_s=w.t_end_s,
            )
            for name, w in results.items()
        }
        t_placed = self._t_placed if self._t_placed is not None else t_s
        cap = Captured(t_s=t_s, t_placed_s=t_placed, windows=windows)
        self._captured_total_g = cap.total_g
        out = self._clear_unsettled(t_s, "settled")
        out.extend(self._set_state(CaptureState.CAPTURED, t_s, f"{cap.total_g:.2f} g"))
        out.append(cap)
        out.extend(self._set_state(CaptureState.HOLDING, t_s, "club on the supports"))
        self._restart_all()
        return out

    # --- empty: noise learning and zero tracking ---
    def _empty_housekeeping(self, ch: ChannelSamples, t_s: float) -> list[CaptureOutput]:
        p = self.params
        j = len(ch.t) - 1
        if j < 0 or ch.last_t != ch.t[j]:
            return []  # the newest sample was not usable
        if p.learn_noise:
            self._learn_noise(ch, j)
        if not p.zero_tracking:
            return []
        first = max(ch.window_from, ch.head)
        if ch.zero_last_s is None:
            ch.zero_last_s = t_s
            return []
        if t_s - ch.zero_last_s < _ZERO_TRACK_INTERVAL_S or j < first:
            return []
        longest = max(p.zero_tracking_window_s, p.max_window_s)
        w = self._longest_stable(ch, first, j, p.zero_tracking_window_s, longest)
        if w is None:
            return []
        return self._track_zero(ch, w, t_s)

    def _learn_noise(self, ch: ChannelSamples, j: int) -> None:
        """Scatter of non-overlapping empty windows about their fitted line."""
        i = max(ch.noise_from, ch.head)
        if j - i + 1 < 5 or ch.t[j] - ch.t[i] < self.params.zero_tracking_window_s:
            return
        f = ch.fit(i, j)
        ch.noise_from = j + 1
        if abs(f.mean - ch.offset_g) > self.params.empty_threshold_g:
            return  # something rests on it after all
        ch.noise_estimates.append(math.sqrt(f.resid_var))

    def _track_zero(self, ch: ChannelSamples, w: StableWindow, t_s: float) -> list[CaptureOutput]:
        p = self.params
        d = ch.d_g
        last = ch.zero_last_s if ch.zero_last_s is not None else t_s
        elapsed = min(t_s - last, p.zero_tracking_window_s)
        ch.zero_last_s = t_s
        error = w.fit.mean - ch.offset_g
        se = math.sqrt(max(ch.noise_g**2, w.fit.resid_var) / w.fit.n)
        band = p.zero_tracking_band_d * d
        if abs(error) > band:
            # not "at zero": something small is on the supports, or the zero ran away faster
            # than tracking may follow; the operator has to zero
            if abs(error) > band + 2.0 * se and ch.name not in self._needs_zero:
                self._needs_zero.add(ch.name)
                msg = f"{ch.name} reads {error:+.3g} g while empty and stable: zero it"
                return [Warning("needs_zero", t_s, msg, ch.name)]
            return []
        out: list[CaptureOutput] = []
        if ch.name in self._needs_zero:
            self._needs_zero.discard(ch.name)
            out.append(Warning("needs_zero", t_s, f"{ch.name} back at zero", ch.name, False))
        if abs(error) < se:
            return out  # within the noise of the mean: do not let the zero wander
        step = p.zero_tracking_rate_d_per_s * d * elapsed  # at most 0.5 d/s (OIML R 76-1 4.5.7)
        correction = max(-step, min(step, error))
        limit = p.zero_tracking_limit_fraction * self.params.capacity_for(ch.name)
        new = ch.offset_g + correction
        if abs(new) > limit:  # 4 % of capacity (OIML R 76-1 4.5.1)
            new = math.copysign(limit, new)
            if ch.name not in self._zero_warned:
                self._zero_warned.add(ch.name)
                out.append(
                    Warning(
                        "zero_out_of_range",
                        t_s,
                        f"{ch.name}: zero has drifted beyond {limit:g} g "
                        f"({p.zero_tracking_limit_fraction:.0%} of capacity); zero or recalibrate",
                        ch.name,
                    )
                )
        if new != ch.offset_g:
            ch.offset_g = new
            ch.latest_net_g = ch.x[-1] - new
            out.append(ZeroTracked(ch.name, new, t_s))
        return out

    # --- helpers ---
    def _total_net_g(self) -> float:
        return sum(c.latest_net_g for c in self._ch.values())

    def _latest_t(self) -> float:
        ts = [c.last_t for c in self._ch.values() if c.last_t is not None]
        return max(ts) if ts else (self._t_first or 0.0)
