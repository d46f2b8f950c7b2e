"""The simulated bench against textbook statics and vibration theory."""

from __future__ import annotations

import itertools
import math
import random

import pytest

from heft.drivers.sim.physics import (
    BenchTimeline,
    Club,
    Dynamics,
    FulcrumLever,
    Placement,
    SensorNoise,
    SingleScale,
    TwoSupports,
    cycle_placements,
    make_geometry,
    placement_force_g,
)

CLUB = Club(390.0, 29.5, "LCW-TEST-7I")  # invented club


def test_two_supports_match_simply_supported_beam_reactions() -> None:
    # A point load P on a simply supported span L, at a from the left support and b from the
    # right: R_left = P*b/L, R_right = P*a/L (textbook statics, e.g. Hibbeler, Statics, ch. 5).
    geo = TwoSupports(4.0, 36.0)
    forces = geo.static_forces_g(CLUB)
    span, a, b = 32.0, 29.5 - 4.0, 36.0 - 29.5
    assert forces[0] == pytest.approx(390.0 * b / span, rel=1e-12)  # 79.21875 g
    assert forces[1] == pytest.approx(390.0 * a / span, rel=1e-12)  # 310.78125 g
    assert forces[0] == pytest.approx(79.21875)


@pytest.mark.parametrize(("w", "bp", "xa", "xb"), [(390, 29.5, 4, 36), (310, 33.0, 2, 40),
                                                   (455, 27.1, 6, 30), (400, 38.0, 4, 36)])
def test_two_supports_equilibrium_and_paired_reading_inverse(
    w: float, bp: float, xa: float, xb: float
) -> None:
    # Equilibrium: forces sum to W, moments about the butt sum to W*BP; and the paired-reading
    # formulas of domain.md (W = F1 + F2, BP = (F1 x1 + F2 x2)/W) recover the club.
    f = TwoSupports(xa, xb).static_forces_g(Club(w, bp))
    assert f[0] + f[1] == pytest.approx(w, rel=1e-12)
    assert f[0] * xa + f[1] * xb == pytest.approx(w * bp, rel=1e-12)
    assert (f[0] * xa + f[1] * xb) / (f[0] + f[1]) == pytest.approx(bp, rel=1e-12)


def test_lever_reads_about_ten_grams_per_swing_weight_point_at_five_inches() -> None:
    # A readout 5.00 in from the pivot reads about 10 g per point (tutelman.com, digital
    # swing-weight scale modification; domain.md): 1 point = 1.75 oz*in = 49.61 g*in.
    lever = FulcrumLever(lever_arm_in=5.0)
    point_g_in = 1.75 * 28.349523125
    # Add m grams at 36 in: the moment about 14 in grows by m*(36-14) = one point.
    m = point_g_in / (36.0 - 14.0)
    w2 = CLUB.total_weight_g + m
    bp2 = (CLUB.total_weight_g * CLUB.balance_point_in + m * 36.0) / w2
    delta = lever.static_forces_g(Club(w2, bp2))[0] - lever.static_forces_g(CLUB)[0]
    assert delta == pytest.approx(9.92, abs=0.01)
    # And F * r is the moment about the fulcrum.
    assert lever.static_forces_g(CLUB)[0] * 5.0 == pytest.approx(390.0 * (29.5 - 14.0))


def test_single_scale_reads_the_whole_club() -> None:
    assert SingleScale().static_forces_g(CLUB) == {0: 390.0}
    assert make_geometry("single").channels == (0,)
    with pytest.raises(ValueError, match="unknown geometry"):
        make_geometry("tripod")  # type: ignore[arg-type]


def test_bad_geometry_and_dynamics_are_refused() -> None:
    with pytest.raises(ValueError, match="support_b_in"):
        TwoSupports(36.0, 4.0)
    with pytest.raises(ValueError, match="damping_ratio"):
        Dynamics(damping_ratio=1.2)
    with pytest.raises(ValueError, match="total_weight_g"):
        Club(0.0, 29.0)


def _deviation(dyn: Dynamics, t: float, static: float = 300.0) -> float:
    p = Placement(CLUB, 0.0, 100.0)
    return placement_force_g(p, static, dyn, t) - static


def test_ringing_obeys_the_damped_oscillator_equation() -> None:
    # Free vibration of a viscously damped single-degree-of-freedom system:
    # x'' + 2 zeta omega_n x' + omega_n^2 x = 0 (e.g. Rao, Mechanical Vibrations, ch. 2).
    # Checked with central differences on the simulated deviation after the ramp.
    dyn = Dynamics(frequency_hz=4.0, damping_ratio=0.2, ramp_s=0.03, overshoot=0.2)
    h = 1e-4
    for t in (0.1, 0.23, 0.5, 0.77, 1.3):
        x = _deviation(dyn, t)
        xp = (_deviation(dyn, t + h) - _deviation(dyn, t - h)) / (2 * h)
        xpp = (_deviation(dyn, t + h) - 2 * x + _deviation(dyn, t - h)) / h**2
        residual = xpp + 2 * dyn.damping_ratio * dyn.omega_n * xp + dyn.omega_n**2 * x
        assert abs(residual) < 1e-3 * dyn.omega_n**2 * 60.0  # relative to the initial amplitude


def test_successive_peaks_decay_as_exp_minus_zeta_omega_t() -> None:
    # Peaks of the sampled signal, found numerically, shrink by the logarithmic decrement
    # delta = 2 pi zeta / sqrt(1 - zeta^2) per period 2 pi / omega_d (Rao, ch. 2).
    zeta, fn = 0.12, 3.0
    dyn = Dynamics(frequency_hz=fn, damping_ratio=zeta, ramp_s=0.02, overshoot=0.25)
    dt = 1e-4
    ts = [0.03 + k * dt for k in range(int(2.0 / dt))]
    xs = [_deviation(dyn, t) for t in ts]
    peaks = [(ts[i], xs[i]) for i in range(1, len(xs) - 1) if xs[i - 1] < xs[i] >= xs[i + 1]]
    assert len(peaks) >= 4
    expected_delta = 2 * math.pi * zeta / math.sqrt(1 - zeta**2)
    expected_period = 2 * math.pi / (2 * math.pi * fn * math.sqrt(1 - zeta**2))
    for (t1, x1), (t2, x2) in itertools.pairwise(peaks):
        assert math.log(x1 / x2) == pytest.approx(expected_delta, rel=1e-3)
        assert t2 - t1 == pytest.approx(expected_period, abs=2 * dt)
    # Envelope: peak heights follow A exp(-zeta omega_n t) with A = overshoot * static.
    t1, x1 = peaks[1]
    tau = t1 - dyn.ramp_s
    envelope = 0.25 * 300.0 * math.exp(-zeta * 2 * math.pi * fn * tau)
    assert x1 <= envelope + 1e-9
    assert x1 == pytest.approx(envelope, rel=0.02)  # the peak sits just before cos = 1


def test_ramp_is_continuous_and_lift_off_returns_to_zero() -> None:
    dyn = Dynamics(ramp_s=0.04, lift_ramp_s=0.08)
    p = Placement(CLUB, 1.0, 3.0)
    before = placement_force_g(p, 300.0, dyn, 1.04 - 1e-9)
    after = placement_force_g(p, 300.0, dyn, 1.04 + 1e-9)
    assert before == pytest.approx(after, abs=1e-3)
    assert placement_force_g(p, 300.0, dyn, 0.999) == 0.0
    assert placement_force_g(p, 300.0, dyn, 3.0 + 0.081) == 0.0
    tl = BenchTimeline(TwoSupports(), [p], dyn)
    assert tl.forces_at(5.0) == {0: 0.0, 1: 0.0}
    assert tl.club_at(2.0) == CLUB and tl.club_at(4.0) is None


def test_settle_time_is_when_the_noise_free_signal_stays_within_tolerance() -> None:
    dyn = Dynamics(frequency_hz=4.0, damping_ratio=0.3, overshoot=0.15)
    tl = BenchTimeline(TwoSupports(), [Placement(CLUB, 1.0, 5.0)], dyn)
    (truth,) = tl.truth(tolerance_g=0.1, step_s=0.0005)
    assert truth.settled_at_s is not None
    statics = truth.static_forces_g
    worst_after = max(
        abs(tl.forces_at(truth.settled_at_s + k * 0.001)[ch] - statics[ch])
        for k in range(3000)
        for ch in statics
    )
    assert worst_after <= 0.1
    just_before = tl.forces_at(truth.settled_at_s - 0.0005)
    assert max(abs(just_before[ch] - statics[ch]) for ch in statics) > 0.1
    # Never later than the envelope bound: A exp(-zeta omega_n tau) = tol.
    amp = 0.15 * max(statics.values())
    bound = 1.0 + dyn.ramp_s + math.log(amp / 0.1) / dyn.decay_per_s
    assert truth.settled_at_s <= bound + 0.0005


def test_a_bump_restarts_the_ringing_and_delays_settling() -> None:
    dyn = Dynamics()
    quiet = BenchTimeline(SingleScale(), [Placement(CLUB, 1.0, 6.0)], dyn)
    bumped = BenchTimeline(SingleScale(), [Placement(CLUB, 1.0, 6.0, ((3.0, 20.0),))], dyn)
    (tq,), (tb,) = quiet.truth(0.05), bumped.truth(0.05)
    assert tq.settled_at_s is not None and tb.settled_at_s is not None
    assert tq.settled_at_s < 3.0 < tb.settled_at_s
    assert abs(bumped.forces_at(3.05)[0] - 390.0) > 5.0
    assert abs(quiet.forces_at(3.05)[0] - 390.0) < 0.05


def test_never_settles_before_lift_off_gives_none() -> None:
    dyn = Dynamics(damping_ratio=0.02, frequency_hz=2.0)
    tl = BenchTimeline(SingleScale(), [Placement(CLUB, 1.0, 1.5)], dyn)
    assert tl.truth(0.05)[0].settled_at_s is None


def test_overlapping_placements_are_refused() -> None:
    with pytest.raises(ValueError, match="before the one"):
        BenchTimeline(SingleScale(), [Placement(CLUB, 1.0, 3.0), Placement(CLUB, 2.0, 4.0)])


def test_noise_is_seeded_and_gaussian() -> None:
    a = SensorNoise("s:1", 0.5, 0.0)
    b = SensorNoise("s:1", 0.5, 0.0)
    c = SensorNoise("s:2", 0.5, 0.0)
    xs = [a.sample_g(0.0) for _ in range(4000)]
    assert xs == [b.sample_g(0.0) for _ in range(4000)]
    assert xs[:10] != [c.sample_g(0.0) for _ in range(10)]
    mean = sum(xs) / len(xs)
    sd = math.sqrt(sum((x - mean) ** 2 for x in xs) / (len(xs) - 1))
    assert abs(mean) < 4 * 0.5 / math.sqrt(len(xs))  # within 4 standard errors
    assert sd == pytest.approx(0.5, rel=0.05)
    drift = SensorNoise(1, 0.0, 0.01)
    assert drift.sample_g(100.0) == pytest.approx(1.0)


def test_cycle_placements_repeat_with_seeded_bumps() -> None:


    ps = cycle_placements(CLUB, period_s=4.0, on_s=2.5, count=6, bump_every=3, bump_g=10.0,
                          rng=random.Random(5))
    assert [p.t_on_s for p in ps] == [1.0, 5.0, 9.0, 13.0, 17.0, 21.0]
    assert [bool(p.bumps) for p in ps] == [False, False, True, False, False, True]
    for p in ps:
        for t_b, _ in p.bumps:
            assert p.t_on_s < t_b < p.t_off_s
    tl = BenchTimeline(SingleScale(), ps)
    assert tl.active_index(9.5) == 2 and tl.active_index(12.0) is None


def test_a_script_can_grow_while_it_runs() -> None:
    tl = BenchTimeline(TwoSupports(), [])
    assert tl.forces_at(1.0) == {0: 0.0, 1: 0.0}
    tl.place(CLUB, 1.0)
    assert tl.forces_at(10.0)[1] == pytest.approx(310.78125, abs=1e-6)
    with pytest.raises(ValueError, match="before the one"):
        tl.place(CLUB, 12.0)  # the first club is still on the bench
    tl.bump(11.0, 30.0)
    (truth,) = tl.truth(0.05)  # not lifted yet: ground truth looks 30 s ahead
    assert truth.settled_at_s is not None and 11.0 < truth.settled_at_s < 14.0
    tl.lift(15.0)
    assert tl.forces_at(15.5) == {0: 0.0, 1: 0.0}
    tl.place(Club(410.0, 29.0, "LCW-0002"), 16.0, 19.0)
    assert tl.club_at(17.0) is not None and tl.club_at(17.0).club_id == "LCW-0002"  # type: ignore[union-attr]
    with pytest.raises(ValueError, match="no club on the bench at 20"):
        tl.bump(20.0, 5.0)
