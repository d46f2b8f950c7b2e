"""Capture engine guards on synthetic streams: overload, faults, timeouts, device flags, zero
tracking, bad input, precision over long runs, and any clean placement (property test).

Virtual time only: every stream is generated and fed with its own timestamps, so nothing here
depends on the machine's speed.
"""

from __future__ import annotations

import math
from collections.abc import Callable

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from heft.daemon.capture import (
    CaptureEngine,
    CaptureOutput,
    StateChanged,
    Warning,
    ZeroTracked,
    chi2_quantile_ratio,
)
from heft.daemon.capture_params import CaptureParams
from heft.daemon.events import CaptureState
from heft.drivers.reading import Flag
from tests.capture_streams import (
    D_G,
    RATES_10,
    TWO,
    captures,
    engine_10hz,
    feed,
    ringing,
    step,
    warnings,
)


def test_overload_is_never_captured_and_clears() -> None:
    # capacity 1000 g + 9 d = 1000.9 g (OIML R 76-1 4.2.3); 1001 g on beam/1 is an overload
    e = engine_10hz()
    sigs = {"beam/0": step(1.0, 150.0, 5.0), "beam/1": step(1.0, 1001.0, 5.0)}
    outs = feed(e, sigs, RATES_10, 7.0, noise_g=0.0)
    assert captures(outs) == []
    ov = warnings(outs, "overload")
    assert ov and ov[0].active and ov[0].channel == "beam/1"
    assert [w.active for w in ov] == [True, False]  # cleared when it read in range again


def test_just_below_the_overload_limit_is_a_weight() -> None:
    e = engine_10hz()
    sigs = {"beam/0": step(1.0, 150.0), "beam/1": step(1.0, 1000.8)}
    outs = feed(e, sigs, RATES_10, 4.0, noise_g=0.0)
    assert len(captures(outs)) == 1
    assert warnings(outs, "overload") == []


def test_overload_flag_from_the_device_is_never_a_weight() -> None:
    e = engine_10hz()
    sigs = {"beam/0": step(1.0, 150.0), "beam/1": step(1.0, 250.0)}
    outs = feed(
        e,
        sigs,
        RATES_10,
        6.0,
        flags=lambda ch, t, v: Flag.OVERLOAD if ch == "beam/1" and t >= 1.0 else Flag.NONE,
    )
    assert captures(outs) == []
    assert warnings(outs, "overload")


def test_fault_and_nan_samples_break_the_window_and_do_not_crash() -> None:
    e = engine_10hz()
    sigs = {"beam/0": step(1.0, 150.0), "beam/1": step(1.0, 250.0)}
    outs = feed(e, sigs, RATES_10, 1.25)
    outs += e.on_sample("beam/0", 1.3, float("nan"))
    outs += e.on_sample("beam/1", 1.3, 250.0, Flag.FAULT)
    outs += feed(e, sigs, RATES_10, 5.0, t_start_s=1.4)
    caps = captures(outs)
    assert len(caps) == 1
    assert caps[0].windows["beam/0"].t_start_s > 1.3
    assert caps[0].windows["beam/1"].t_start_s > 1.3


def test_will_not_settle_warning_and_late_capture() -> None:
    def restless(t: float) -> float:
        if t < 1.0:
            return 0.0
        return 200.0 + (3.0 * math.sin(2 * math.pi * 1.7 * t) if t < 9.0 else 0.0)

    e = engine_10hz(settle_timeout_s=4.0)
    outs = feed(e, {"beam/0": restless, "beam/1": step(1.0, 200.0)}, RATES_10, 12.0)
    ws = warnings(outs, "will_not_settle")
    assert ws[0].active and ws[0].t_s == pytest.approx(5.0, abs=0.11)
    assert ws[-1].active is False  # cleared by the late capture
    caps = captures(outs)
    assert len(caps) == 1 and caps[0].t_s > 9.0
    states = [o.state for o in outs if isinstance(o, StateChanged)]
    assert CaptureState.UNSETTLED in states


def test_tick_raises_timeout_and_offline_when_samples_stop() -> None:
    e = engine_10hz(settle_timeout_s=3.0, channel_timeout_s=2.0)
    outs = feed(e, {"beam/0": step(1.0, 150.0), "beam/1": step(1.0, 250.0)}, RATES_10, 1.05)
    assert e.state is CaptureState.SETTLING
    outs = e.tick(2.5)
    assert e.state is CaptureState.SETTLING and outs == []
    outs = e.tick(3.2)
    assert e.state is CaptureState.OFFLINE
    assert "beam/0" in outs[-1].detail if isinstance(outs[-1], StateChanged) else False
    # both channels come back with the club still on: a fresh capture, no window spans the gap
    outs = feed(e, {"beam/0": step(0, 150.0), "beam/1": step(0, 250.0)}, RATES_10, 6.0, t_start_s=4)
    caps = captures(outs)
    assert len(caps) == 1 and caps[0].windows["beam/0"].t_start_s >= 4.0


def test_settle_timeout_by_tick_alone() -> None:
    e = engine_10hz(settle_timeout_s=1.0, channel_timeout_s=5.0)
    feed(e, {"beam/0": step(1.0, 150.0), "beam/1": step(1.0, 250.0)}, RATES_10, 1.05)
    outs = e.tick(2.1)
    assert warnings(outs, "will_not_settle") and e.state is CaptureState.UNSETTLED


def test_device_flags_veto_require_and_trust() -> None:
    sigs = {"bal/0": step(1.0, 400.0)}
    params = CaptureParams.preset("precision_balance")

    def motion_until(t_stable: float) -> Callable[[str, float, float], Flag]:
        return lambda ch, t, v: Flag.STABLE if t >= t_stable else Flag.MOTION

    # veto: the balance says MOTION until 3 s although its readings are steady
    e = CaptureEngine(["bal/0"], params)
    outs = feed(e, sigs, {"bal/0": 10.0}, 5.0, noise_g=0.0, flags=motion_until(3.0))
    assert captures(outs)[0].t_s >= 3.0
    # ignore: the engine's own test decides
    e = CaptureEngine(["bal/0"], params.model_copy(update={"device_flags": "ignore"}))
    outs = feed(e, sigs, {"bal/0": 10.0}, 5.0, noise_g=0.0, flags=motion_until(3.0))
    assert captures(outs)[0].t_s < 2.0
    # require: no STABLE flag ever means no capture
    e = CaptureEngine(["bal/0"], params.model_copy(update={"device_flags": "require"}))
    outs = feed(e, sigs, {"bal/0": 10.0}, 5.0, noise_g=0.0, flags=lambda c, t, v: Flag.NONE)
    assert captures(outs) == []
    # trust: the first STABLE reading is enough even while the values still swing
    swing = ringing(1.0, 400.0, 2.0, 0.1, 0.1)
    e = CaptureEngine(["bal/0"], params.model_copy(update={"device_flags": "trust"}))
    outs = feed(e, {"bal/0": swing}, {"bal/0": 10.0}, 5.0, flags=motion_until(1.5))
    assert captures(outs)[0].t_s == pytest.approx(1.5, abs=0.11)


def test_zero_tracking_follows_slow_drift_while_empty() -> None:
    # zero drifting at 0.2 d/s: within the 0.5 d/s a tracker may follow (OIML R 76-1 4.5.7)
    e = CaptureEngine(["beam/0"], CaptureParams.preset("hx711_10hz", noise_g=0.01))
    drift = 0.2 * D_G
    outs = feed(
        e, {"beam/0": lambda t: drift * t}, {"beam/0": 10.0}, 30.0, noise_g=0.01, round_to_d=False
    )
    assert [o for o in outs if isinstance(o, ZeroTracked)]
    assert e.zero_offsets_g["beam/0"] == pytest.approx(drift * 30.0, abs=1.5 * D_G)


def test_zero_tracking_rate_is_bounded_to_half_a_division_per_second() -> None:
    # a 0.4 d step while empty: the tracker removes it at no more than 0.5 d/s
    # (OIML R 76-1 4.5.7 via domain.md)
    e = CaptureEngine(["beam/0"], CaptureParams.preset("hx711_10hz", noise_g=0.005))
    sig = step(5.0, 0.04)
    outs = feed(e, {"beam/0": sig}, {"beam/0": 10.0}, 15.0, noise_g=0.0, round_to_d=False)
    tracked = [o for o in outs if isinstance(o, ZeroTracked)]
    assert tracked and tracked[-1].offset_g == pytest.approx(0.04, abs=1e-9)
    # corrections are evaluated every 0.5 s, so allow one interval before the step
    for z in tracked:
        assert abs(z.offset_g) <= 0.5 * D_G * (z.t_s - 5.0 + 0.5) + 1e-9
    # a 0.4 d step at 0.5 d/s takes at least 0.8 s to remove
    assert tracked[-1].t_s >= 5.0 + 0.8 - 0.5


def test_zero_tracking_stops_at_four_percent_of_capacity() -> None:
    # total tracking correction within 4 % of capacity (OIML R 76-1 4.5.1 via domain.md):
    # capacity 10 g here so the 0.4 g limit is reached within a short stream
    params = CaptureParams.preset(
        "hx711_10hz",
        capacity_g=10.0,
        noise_g=0.005,
        placement_threshold_g=2.0,
        empty_threshold_g=1.0,
    )
    e = CaptureEngine(["beam/0"], params)
    outs = feed(
        e, {"beam/0": lambda t: 0.045 * t}, {"beam/0": 10.0}, 20.0, noise_g=0.0, round_to_d=False
    )
    assert abs(e.zero_offsets_g["beam/0"]) <= 0.04 * 10.0 + 1e-12
    assert e.zero_offsets_g["beam/0"] == pytest.approx(0.4)
    assert warnings(outs, "zero_out_of_range")
    cleared = e.reset_zero("beam/0")
    assert e.zero_offsets_g["beam/0"] == 0.0
    assert any(isinstance(o, Warning) and not o.active for o in cleared)


def test_zero_tracking_does_not_act_on_a_load_or_a_step_beyond_its_band() -> None:
    e = CaptureEngine(["beam/0"], CaptureParams.preset("hx711_10hz", noise_g=0.01))
    # 2 g left on the supports (below the placement threshold, beyond the 0.5 d band)
    outs = feed(e, {"beam/0": step(2.0, 2.0)}, {"beam/0": 10.0}, 20.0, noise_g=0.01)
    assert abs(e.zero_offsets_g["beam/0"]) < 0.5 * D_G
    needs = warnings(outs, "needs_zero")
    assert len(needs) == 1 and needs[0].active and needs[0].t_s > 2.0
    # and nothing tracks while a club is on
    e2 = engine_10hz()
    outs = feed(e2, {"beam/0": step(0.5, 150.0), "beam/1": step(0.5, 250.0)}, RATES_10, 30.0)
    assert not [o for o in outs if isinstance(o, ZeroTracked) and o.t_s > 0.5]


def test_captured_mean_is_net_of_the_tracked_zero() -> None:
    e = CaptureEngine(["beam/0"], CaptureParams.preset("hx711_10hz", noise_g=0.005))
    sig = lambda t: 0.04 + (300.0 if t >= 15.0 else 0.0)  # noqa: E731
    outs = feed(e, {"beam/0": sig}, {"beam/0": 10.0}, 18.0, noise_g=0.0, round_to_d=False)
    caps = captures(outs)
    assert len(caps) == 1
    assert caps[0].windows["beam/0"].mean_g == pytest.approx(300.0, abs=1e-6)


def test_bad_input_is_refused_or_ignored() -> None:
    e = engine_10hz()
    with pytest.raises(ValueError, match="unknown channel 'beam/9'"):
        e.on_sample("beam/9", 0.0, 1.0)
    e.on_sample("beam/0", 1.0, 0.0)
    assert e.on_sample("beam/0", 0.5, 0.0) == []  # out of order: ignored
    assert e.dropped_samples == 1
    with pytest.raises(ValueError, match="unique"):
        CaptureEngine(["a", "a"], CaptureParams())


def test_chi_square_quantiles_match_tables() -> None:
    # NIST/SEMATECH e-Handbook of Statistical Methods, 1.3.6.7.4 (upper critical values):
    # chi2(0.999, 10) = 29.588, chi2(0.99, 5) = 15.086, chi2(0.999, 30) = 59.703
    assert chi2_quantile_ratio(10, 0.999) * 10 == pytest.approx(29.588, rel=0.02)
    assert chi2_quantile_ratio(5, 0.99) * 5 == pytest.approx(15.086, rel=0.02)
    assert chi2_quantile_ratio(30, 0.999) * 30 == pytest.approx(59.703, rel=0.01)


def test_long_running_stream_stays_precise() -> None:
    # hours of samples: the running sums are re-centred, so a capture late on is still exact
    e = CaptureEngine(["beam/0"], CaptureParams.preset("hx711_80hz", noise_g=0.001))
    t = 0.0
    for k in range(60_000):
        t = 10_000.0 + k / 80.0
        e.on_sample("beam/0", t, 0.0)
    outs: list[CaptureOutput] = []
    for k in range(1, 200):
        outs += e.on_sample("beam/0", t + k / 80.0, 437.25)
    caps = captures(outs)
    assert len(caps) == 1
    assert caps[0].windows["beam/0"].mean_g == pytest.approx(437.25, abs=1e-6)


def test_trusted_devices_out_of_phase_still_capture() -> None:
    # two balances that each vouch for their own stability, sampled 37 ms apart
    params = CaptureParams.preset("precision_balance", device_flags="trust")
    e = CaptureEngine(TWO, params)
    outs = feed(
        e,
        {"beam/0": step(1.0, 150.0), "beam/1": step(1.0, 250.0)},
        RATES_10,
        4.0,
        noise_g=0.0,
        offsets_s={"beam/1": 0.037},
        flags=lambda ch, t, v: Flag.STABLE if t >= 2.0 else Flag.MOTION,
    )
    caps = captures(outs)
    assert len(caps) == 1 and caps[0].t_s == pytest.approx(2.037, abs=0.11)


def test_back_from_offline_with_the_captured_club_holds() -> None:
    e = engine_10hz(channel_timeout_s=2.0)
    sigs = {"beam/0": step(1.0, 150.0), "beam/1": step(1.0, 250.0)}
    outs = feed(e, sigs, RATES_10, 3.0)
    assert len(captures(outs)) == 1
    e.tick(5.5)
    assert e.state is CaptureState.OFFLINE
    outs = feed(e, sigs, RATES_10, 9.0, t_start_s=6.0)
    assert captures(outs) == []
    assert e.state is CaptureState.HOLDING
    assert e.rearm() == [StateChanged(CaptureState.SETTLING, pytest.approx(8.9), "re-armed")]


@settings(max_examples=25, deadline=None)
@given(
    a_g=st.floats(30.0, 600.0),
    b_g=st.floats(30.0, 600.0),
    noise_d=st.floats(0.0, 2.0),
    rate=st.sampled_from([10.0, 80.0]),
    seed=st.integers(0, 10_000),
)
def test_any_clean_placement_is_captured_once_within_its_noise(
    a_g: float, b_g: float, noise_d: float, rate: float, seed: int
) -> None:
    noise_g = noise_d * D_G
    params = CaptureParams.preset("hx711_10hz", noise_g=max(noise_g, 0.01))
    e = CaptureEngine(TWO, params)
    outs = feed(
        e,
        {"beam/0": step(2.0, a_g, 9.0), "beam/1": step(2.0, b_g, 9.0)},
        {"beam/0": rate, "beam/1": rate},
        11.0,
        noise_g=noise_g,
        seed=seed,
        round_to_d=False,
    )
    caps = captures(outs)
    assert len(caps) == 1
    for ch, true_g in (("beam/0", a_g), ("beam/1", b_g)):
        w = caps[0].windows[ch]
        # the window mean is within 5 standard errors of the truth (plus a little for the
        # zero tracked from noise before the placement)
        assert abs(w.mean_g - true_g) <= 5 * noise_g / math.sqrt(w.n) + 0.5 * D_G
    assert e.state is CaptureState.EMPTY
