"""``heft calc``'s requests used directly (no argparse): each form, its checks, its answers.

Check values come from published sources named beside them, never from heft's own constants.
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Callable

import pytest

from heft.daemon.calc.compute import calculate
from heft.daemon.calc.requests import (
    CalcError,
    CalcRequest,
    ExtraMass,
    InputUncertainty,
    LeverBeam,
    MeasuredClub,
    PartsPrediction,
    PendulumRequest,
    TargetRequest,
    TwoSupports,
)
from heft.daemon.physics.build_defaults import End

# 1 oz = 28.349523125 g and 1 in = 25.4 mm exactly (international yard and pound, 1959).
OZ_G = 28.349523125
# The Lorythmic scale of the trade tables: A0 = 161 oz*in about the 14 in fulcrum, 1.75 oz*in a
# point, so C0 = 196 and D0 = 213.5 oz*in (japanese.yujigolf.com/2012/01/blog-post_10.html).
A0_OZ_IN, OZ_IN_PER_POINT = 161.0, 1.75


def points_by_hand(moment_14in_g_in: float) -> float:
    return (moment_14in_g_in / OZ_G - A0_OZ_IN) / OZ_IN_PER_POINT


def bp_for_moment_in(weight_g: float, moment_oz_in: float) -> float:
    """The balance point giving ``moment_oz_in`` about 14 in (statics: M = W * (BP - 14))."""
    return 14.0 + moment_oz_in * OZ_G / weight_g


# --- the four forms of a club ------------------------------------------------------------------


def test_measured_club_matches_the_published_driver() -> None:
    # The published C5 driver: 307.8 g, BP 83.5 cm, 204.9 oz*in (same trade-table page).
    result = calculate(CalcRequest(MeasuredClub(307.8, 835 / 25.4)))
    assert result.method == "weight_balance"
    assert result.club.moment_oz_in == pytest.approx(204.9, abs=0.05)
    assert result.club.swingweight.startswith("C5")


@pytest.mark.parametrize(("moment_oz_in", "label"), [(196.0, "C0.0"), (213.5, "D0.0")])
def test_trade_table_anchors(moment_oz_in: float, label: str) -> None:
    # C0 = 196 and D0 = 213.5 oz*in (trade tables, as above).
    club = MeasuredClub(400.0, bp_for_moment_in(400.0, moment_oz_in))
    numbers = calculate(CalcRequest(club)).club
    assert numbers.swingweight == label
    assert numbers.moment_oz_in == pytest.approx(moment_oz_in, rel=1e-12)


def test_two_supports_is_textbook_statics() -> None:
    # Sum of forces and of moments (any statics text): W = Fa + Fb, M14 = sum F_i (x_i - 14).
    club = TwoSupports(position_a_in=4.0, reading_a_g=75.0, position_b_in=36.0, reading_b_g=315.0)
    numbers = calculate(CalcRequest(club)).club
    assert numbers.total_weight_g == pytest.approx(390.0)
    assert numbers.balance_point_in == pytest.approx((75 * 4 + 315 * 36) / 390)
    assert numbers.moment_g_in == pytest.approx(75 * (4 - 14) + 315 * (36 - 14))
    assert numbers.swingweight_points == pytest.approx(points_by_hand(75 * -10 + 315 * 22))


def test_lever_beam_is_the_lever_law() -> None:
    # Moment = force * arm (lever law); BP = 14 + M / W.
    numbers = calculate(CalcRequest(LeverBeam(force_g=1210.0, lever_arm_in=5.0,
                                              total_weight_g=420.0))).club  # fmt: skip
    assert numbers.moment_g_in == pytest.approx(6050.0)
    assert numbers.balance_point_in == pytest.approx(14 + 6050 / 420)


def uniform_7_iron(**changes: object) -> PartsPrediction:
    """Parts with a uniform shaft (balance point at half its length): trimming then removes mass
    in proportion to length, as for any uniform rod."""
    values: dict[str, object] = dict(
        length_in=37.0, head_g=260.0, shaft_g=120.0, shaft_length_in=40.0,
        shaft_balance_point_in=20.0, grip_g=50.0, head_cg_from_end_in=1.0, grip_cg_in=4.5,
        tip_trim_in=2.0, butt_trim_in=2.0,
    )  # fmt: skip
    values.update(changes)
    return PartsPrediction(**values)  # type: ignore[arg-type]


def test_parts_are_point_masses() -> None:
    # Head at 37 - 1 = 36 in, shaft 36 in of a 3 g/in rod (108 g) centred at 18 in, grip at
    # 4.5 in: W = 418 g, M14 = 260*22 + 108*4 + 50*(-9.5) = 5677 g*in (statics, by hand).
    result = calculate(CalcRequest(uniform_7_iron()))
    assert result.method == "parts"
    assert result.club.total_weight_g == pytest.approx(418.0)
    assert result.club.moment_g_in == pytest.approx(5677.0)
    assert result.club.total_weight_g_u is None  # a prediction carries no uncertainty


def test_an_extra_rides_with_the_nearer_end_and_moves_with_the_head() -> None:
    tape = ExtraMass("tape", 2.0, 35.0)  # no end given: nearer the tip of a 37 in club
    assert tape.place(37.0).rides_with is End.TIP
    before = calculate(CalcRequest(uniform_7_iron(extras=(tape,))))
    assert before.club.total_weight_g == pytest.approx(420.0)
    # Cut 1 in at the butt: the shaft loses 3 g at the butt, everything riding with the tip
    # moves 1 in towards the butt: M14 = 260*21 + 105*3.5 + 50*(-9.5) + 2*20 (by hand).
    after = calculate(CalcRequest(uniform_7_iron(extras=(tape,), length_change_in=-1.0)))
    assert after.club.moment_g_in == pytest.approx(5392.5)
    assert after.length_change is not None and after.length_change.end == "butt"
    assert after.length_change.points_before == pytest.approx(before.club.swingweight_points)


# --- uncertainty, target, pendulum ----------------------------------------------------------------


def test_display_step_is_a_net_reading() -> None:
    # A reading rounded to d is rectangular with half-width d/2: u = d/sqrt(12); a net reading
    # (load minus tared zero) holds two: d/sqrt(6) (GUM, JCGM 100:2008, F.2.2.1). Two support
    # readings add in quadrature; expanded with k = 2.
    u = InputUncertainty(display_step_g=0.1)
    assert u.mass_g == pytest.approx(0.1 / math.sqrt(6))
    club = TwoSupports(4.0, 75.0, 36.0, 315.0)
    numbers = calculate(CalcRequest(club, u)).club
    assert numbers.total_weight_g_u == pytest.approx(2 * math.sqrt(2) * 0.1 / math.sqrt(6))


def test_target_lands_on_the_target() -> None:
    # dm = (P_target - P_now) * 1.75 oz*in * 28.349523125 g/oz / (x - 14) (moments add; trade
    # tables for the point).
    club = MeasuredClub(412.0, 29.1)
    now = points_by_hand(412.0 * 15.1)
    result = calculate(CalcRequest(club, length_in=37.5, target=TargetRequest("d-2")))
    assert result.correction is not None
    k = result.correction.numbers.correction
    assert k.position_in == pytest.approx(36.5) and result.correction.at_source == "head"
    assert k.mass_g == pytest.approx((32.0 - now) * OZ_IN_PER_POINT * OZ_G / (36.5 - 14))
    w, bp = k.corrected_total_weight_g, k.corrected_balance_point_in
    assert points_by_hand(w * (bp - 14)) == pytest.approx(32.0, abs=1e-9)
    assert result.correction.target_label == "D2.0"


def test_target_label_echoes_its_precision() -> None:
    target = TargetRequest("C9.95")  # ten points a letter, A0 = 0 (trade tables)
    assert target.points == pytest.approx(29.95) and target.echo == "C9.95"


def test_pendulum_moi_is_the_physical_pendulum() -> None:
    # I_pivot = m g d T^2 / (4 pi^2), parallel axis to the butt: + m p (2 BP - p)
    # (phys.libretexts.org, physical pendulum); g = 9.80665 m/s^2 (3rd CGPM).
    pendulum = PendulumRequest(period_s=1.85, pivot_in=1.0)
    result = calculate(CalcRequest(MeasuredClub(430.0, 29.0), pendulum=pendulum))
    g_in_s2 = 9.80665 / 0.0254
    i_butt = 430 * g_in_s2 * 28 * 1.85**2 / (4 * math.pi**2) + 430 * 1 * (2 * 29 - 1)
    assert result.moi_g_in2 is not None
    assert result.moi_g_in2.value == pytest.approx(i_butt, rel=1e-9)


# --- checks on construction: each names its field -----------------------------------------------


@pytest.mark.parametrize(
    ("make", "fields", "fragment"),
    [
        (lambda: InputUncertainty(display_step_g=-1), ("uncertainty.display_step_g",), ">= 0"),
        (lambda: InputUncertainty(position_in=math.nan), ("uncertainty.position_in",), "nan"),
        (lambda: MeasuredClub(0.0, 29.0), ("club.total_weight_g", "club.balance_point_in"),
         "positive"),
        (lambda: TwoSupports(4.0, 75.0, 4.0, 315.0),
         ("club.position_a_in", "club.reading_a_g", "club.position_b_in", "club.reading_b_g"),
         "different positions"),
        (lambda: LeverBeam(1210.0, 0.0, 420.0),
         ("club.force_g", "club.lever_arm_in", "club.total_weight_g"), "lever arm"),
        (lambda: TargetRequest("H3"), ("target.label",), "'H'"),
        (lambda: PendulumRequest(1.8, 1.0, amplitude_deg=90), ("pendulum.amplitude_deg",), "90"),
        (lambda: PendulumRequest(1.8, 1.0, period_u_s=-1), ("pendulum.period_u_s",), ">= 0"),
        (lambda: uniform_7_iron(shaft_balance_point_in=5.0), ("club.shaft",), "1/3 and 2/3"),
        (lambda: uniform_7_iron(head_g=-5.0), ("club",), "head"),
        (lambda: uniform_7_iron(extras=(ExtraMass("tape", -2, 30),)), ("club.extras[0]",),
         "tape"),
        (lambda: uniform_7_iron(length_change_in=-40.0), ("club.length_change_in",), "trim"),
        (lambda: CalcRequest(MeasuredClub(400, 29), length_in=37,
                             target=TargetRequest("D2", at_in=40)), ("target.at_in",), "off"),
    ],
)  # fmt: skip
def test_a_bad_request_names_its_field(
    make: Callable[[], object], fields: tuple[str, ...], fragment: str
) -> None:
    with pytest.raises(CalcError) as err:
        make()
    assert err.value.fields == fields
    assert fragment in err.value.message


def test_answers_that_cannot_exist_name_their_field() -> None:
    with pytest.raises(CalcError) as err:  # balances beyond its own length
        calculate(CalcRequest(MeasuredClub(400.0, 29.0), length_in=20.0))
    assert err.value.fields == ("length_in",)
    with pytest.raises(CalcError) as err:  # a mass on the fulcrum moves nothing
        calculate(CalcRequest(MeasuredClub(400.0, 29.0), target=TargetRequest("D2", at_in=14)))
    assert err.value.fields == ("target.label", "target.at_in")
    with pytest.raises(CalcError) as err:  # faster than a point mass at the balance point
        calculate(CalcRequest(MeasuredClub(400.0, 29.0), pendulum=PendulumRequest(0.1, 1.0)))
    assert err.value.fields == ("pendulum.period_s", "pendulum.pivot_in")


def test_requests_are_frozen_values() -> None:
    club = MeasuredClub(400.0, 29.0)
    with pytest.raises(dataclasses.FrozenInstanceError):
        club.total_weight_g = 1.0  # type: ignore[misc]
    assert club == MeasuredClub(400.0, 29.0)
