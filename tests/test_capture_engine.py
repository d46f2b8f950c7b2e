"""Capture engine on synthetic streams: steps, ramps, oscillations, bumps, timing across channels.

Virtual time only: every stream is generated and fed with its own timestamps, so nothing here
depends on the machine's speed.
"""

from __future__ import annotations

import math

import pytest

from heft.daemon.capture import (
    CaptureEngine,
    StateChanged,
)
from heft.daemon.capture_params import CaptureParams
from heft.daemon.events import CaptureState
from tests.capture_streams import (
    D_G,
    RATES_10,
    TWO,
    Signal,
    captures,
    engine_10hz,
    feed,
    ringing,
    step,
)


def test_step_is_captured_once_after_the_minimum_window() -> None:
    e = engine_10hz()
    outs = feed(e, {"beam/0": step(3.0, 140.0), "beam/1": step(3.0, 260.0)}, RATES_10, 8.0)
    caps = captures(outs)
    assert len(caps) == 1
    c = caps[0]
    # OIML R 76-1 4.4.2 (domain.md): stable for at least 0.4 s before a result is recorded
    assert c.t_s >= 3.0 + 0.4 - 1e-9
    assert c.t_s <= 3.0 + 1.0  # a clean step needs no more than a short window
    assert c.windows["beam/0"].mean_g == pytest.approx(140.0, abs=D_G)
    assert c.windows["beam/1"].mean_g == pytest.approx(260.0, abs=D_G)
    assert c.total_g == pytest.approx(400.0, abs=D_G)
    assert c.t_placed_s == pytest.approx(3.0)
    assert e.state is CaptureState.HOLDING
    states = [o.state for o in outs if isinstance(o, StateChanged)]
    assert states == [CaptureState.SETTLING, CaptureState.CAPTURED, CaptureState.HOLDING]


def test_ramp_is_not_captured_until_it_stops() -> None:
    # load creeping at 2 g/s (20 d/s) from 1 s to 4 s, then constant
    def creep(t: float) -> float:
        return 0.0 if t < 1.0 else 50.0 + 2.0 * (min(t, 4.0) - 1.0)

    e = engine_10hz(placement_threshold_g=10.0)
    outs = feed(e, {"beam/0": creep, "beam/1": step(1.0, 100.0)}, RATES_10, 7.0)
    caps = captures(outs)
    assert len(caps) == 1
    assert caps[0].t_s >= 4.0 + 0.4 - 1e-9
    assert caps[0].windows["beam/0"].mean_g == pytest.approx(56.0, abs=D_G)


def test_slow_drift_below_one_division_per_window_is_accepted() -> None:
    # 0.1 d/s creep: the trend moves far less than 1 d across any window, so it counts as stable
    def creep(t: float) -> float:
        return 0.0 if t < 1.0 else 200.0 + 0.01 * (t - 1.0)

    e = engine_10hz()
    outs = feed(e, {"beam/0": creep, "beam/1": step(1.0, 100.0)}, RATES_10, 4.0)
    assert len(captures(outs)) == 1


def test_damped_oscillation_is_captured_after_it_has_died_down() -> None:
    freq, zeta, over = 3.0, 0.15, 0.25
    sig0 = ringing(2.0, 150.0, freq, zeta, over)
    sig1 = ringing(2.0, 250.0, freq, zeta, over)
    e = engine_10hz()
    outs = feed(e, {"beam/0": sig0, "beam/1": sig1}, RATES_10, 10.0)
    caps = captures(outs)
    assert len(caps) == 1
    c = caps[0]
    # envelope 0.25*250*exp(-zeta*wn*tau) falls below 1 d at tau = ln(625)/(zeta*wn) = 2.28 s
    decay = zeta * 2 * math.pi * freq
    tau_1d = math.log(over * 250.0 / D_G) / decay
    assert c.t_s > 2.0 + 0.5 * tau_1d  # never while it still swings by many d
    assert c.t_s < 2.0 + tau_1d + 1.5
    assert c.windows["beam/1"].mean_g == pytest.approx(250.0, abs=2 * D_G)
    assert c.windows["beam/0"].mean_g == pytest.approx(150.0, abs=2 * D_G)


def test_heavy_noise_needs_longer_averaging_but_gets_the_mean_right() -> None:
    params = CaptureParams.preset("hx711_80hz")  # noise prior 0.15 g = 1.5 d
    e = CaptureEngine(TWO, params)
    rates = {"beam/0": 80.0, "beam/1": 80.0}
    outs = feed(
        e, {"beam/0": step(3.0, 120.0), "beam/1": step(3.0, 280.0)}, rates, 8.0, noise_g=0.15
    )
    caps = captures(outs)
    assert len(caps) == 1
    w = caps[0].windows["beam/1"]
    assert w.n >= 9  # (1.5 d / 0.5 d)^2 = 9 samples to reach the required standard error
    assert w.mean_g == pytest.approx(280.0, abs=D_G)


def test_bump_delays_capture_until_it_has_died_down() -> None:
    def with_bump(value: float) -> Signal:
        def f(t: float) -> float:
            if t < 1.0:
                return 0.0
            v = value
            if t >= 1.3:  # a knock on the bench 0.3 s after placement: 40 g impulse response
                s = t - 1.3
                v += 40.0 * math.exp(-3.0 * s) * math.sin(2 * math.pi * 4.0 * s)
            return v

        return f

    e = engine_10hz()
    outs = feed(e, {"beam/0": with_bump(150.0), "beam/1": with_bump(250.0)}, RATES_10, 8.0)
    caps = captures(outs)
    assert len(caps) == 1
    # 40 g * exp(-3 s) < 1 d only after ln(400)/3 = 2.0 s
    assert caps[0].t_s > 1.3 + 1.0
    assert caps[0].total_g == pytest.approx(400.0, abs=2 * D_G)


def test_club_left_on_the_beam_is_captured_once_and_bumps_while_holding_do_not_recapture() -> None:
    def held(value: float) -> Signal:
        def f(t: float) -> float:
            if t < 1.0:
                return 0.0
            v = value
            for tb in (10.0, 30.0):
                if t >= tb:
                    s = t - tb
                    v += 20.0 * math.exp(-3.0 * s) * math.sin(2 * math.pi * 4.0 * s)
            return v

        return f

    e = engine_10hz()
    outs = feed(e, {"beam/0": held(150.0), "beam/1": held(250.0)}, RATES_10, 61.0)
    assert len(captures(outs)) == 1
    assert e.state is CaptureState.HOLDING


def test_removal_rearms_and_the_next_club_is_captured() -> None:
    def two_clubs(a: float, b: float) -> Signal:
        return lambda t: a if 1.0 <= t < 4.0 else (b if 6.0 <= t < 9.0 else 0.0)

    e = engine_10hz()
    outs = feed(e, {"beam/0": two_clubs(150, 160), "beam/1": two_clubs(250, 240)}, RATES_10, 11.0)
    caps = captures(outs)
    assert [round(c.total_g) for c in caps] == [400, 400]
    assert caps[0].windows["beam/0"].mean_g == pytest.approx(150.0, abs=D_G)
    assert caps[1].windows["beam/0"].mean_g == pytest.approx(160.0, abs=D_G)
    states = [o.state for o in outs if isinstance(o, StateChanged)]
    assert states.count(CaptureState.EMPTY) == 2
    assert e.state is CaptureState.EMPTY


def test_lifted_before_settling_is_not_captured() -> None:
    sig = ringing(1.0, 200.0, 2.0, 0.05, 0.3)  # still swinging by grams when lifted at 2.5 s
    e = engine_10hz()
    outs = feed(
        e,
        {"beam/0": lambda t: sig(t) if t < 2.5 else 0.0, "beam/1": step(1.0, 200.0, 2.5)},
        RATES_10,
        6.0,
    )
    assert captures(outs) == []
    assert e.state is CaptureState.EMPTY


def test_rearm_command_captures_the_club_on_the_supports_again() -> None:
    e = engine_10hz()
    sigs = {"beam/0": step(1.0, 150.0), "beam/1": step(1.0, 250.0)}
    outs = feed(e, sigs, RATES_10, 4.0)
    assert len(captures(outs)) == 1
    re = e.rearm()
    assert [o.state for o in re if isinstance(o, StateChanged)] == [CaptureState.SETTLING]
    outs2 = feed(e, sigs, RATES_10, 7.0, t_start_s=4.0)
    assert len(captures(outs2)) == 1
    assert captures(outs2)[0].t_s >= 4.0 + 0.4 - 1e-9  # the new window starts after the re-arm


def test_channels_at_different_rates_need_overlapping_stable_windows() -> None:
    # beam/0 at 80 Hz: stable 1.0-1.9 s, swinging 1.9-4.0 s, stable after.
    # beam/1 at 10 Hz: swinging until 2.2 s, stable after.
    # Each is stable for > 0.4 s on its own before 4 s, but never both at once.
    def a(t: float) -> float:
        if t < 1.0:
            return 0.0
        swing = 5.0 * math.sin(2 * math.pi * 3.0 * t) if 1.9 <= t < 4.0 else 0.0
        return 150.0 + swing

    def b(t: float) -> float:
        if t < 1.0:
            return 0.0
        return 250.0 + (5.0 * math.sin(2 * math.pi * 2.0 * t) if t < 2.2 else 0.0)

    params = CaptureParams.preset("hx711_10hz", noise_g=0.03)
    e = CaptureEngine(TWO, params)
    outs = feed(
        e,
        {"beam/0": a, "beam/1": b},
        {"beam/0": 80.0, "beam/1": 10.0},
        7.0,
        offsets_s={"beam/1": 0.037},
    )
    caps = captures(outs)
    assert len(caps) == 1
    c = caps[0]
    assert c.t_s >= 4.0 + 0.4 - 1e-9
    w0, w1 = c.windows["beam/0"], c.windows["beam/1"]
    assert w0.t_start_s >= 4.0 - 1e-9  # no window reaches back into the swing
    assert w1.t_start_s >= 2.2 - 1e-9
    assert min(w0.t_end_s, w1.t_end_s) - max(w0.t_start_s, w1.t_start_s) >= 0.4 - 0.1 - 1e-9
