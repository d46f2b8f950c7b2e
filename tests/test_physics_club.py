"""ClubNumbers: the record every part of heft builds on."""

from __future__ import annotations

import dataclasses

import pytest

from heft.daemon.measurement import Measurement
from heft.daemon.physics.club import (
    ClubNumbers,
    club_from_lever,
    club_from_two_supports,
    club_from_weight_and_balance,
)
from heft.daemon.physics.statics import StaticsError
from heft.daemon.physics.uncertainty import UncertainValue as U

FIELDS = [
    "total_weight_g", "total_weight_g_u", "balance_point_in", "balance_point_in_u",
    "moment_g_in", "moment_g_in_u", "moment_oz_in", "moment_oz_in_u",
    "swingweight", "swingweight_points", "swingweight_points_u",
]  # fmt: skip


def test_fields_match_the_measurement_record() -> None:
    names = [f.name for f in dataclasses.fields(ClubNumbers)]
    assert names == FIELDS
    assert set(FIELDS) <= set(Measurement.model_fields)
    c = club_from_weight_and_balance(U(420.0), U(28.9))
    assert list(c.as_dict()) == FIELDS


def test_no_input_uncertainty_means_none() -> None:
    c = club_from_weight_and_balance(U(420.0), U(28.9))
    assert all(c.as_dict()[k] is None for k in FIELDS if k.endswith("_u"))


def test_u_fields_are_expanded_k2() -> None:
    # Only W uncertain: M = W*(BP-14), so u(M) = (BP-14)*u(W) (GUM eq. 10); reported as 2*u.
    c = club_from_weight_and_balance(U(420.0, 0.5), U(28.9))
    assert c.total_weight_g_u == pytest.approx(1.0)
    assert c.moment_g_in_u == pytest.approx(2 * 0.5 * 14.9)
    assert c.moment_oz_in_u == pytest.approx(2 * 0.5 * 14.9 / 28.349523125)
    # 1 point = 1.75 oz*in (trade tables, japanese.yujigolf.com/2012/01/blog-post_10.html).
    assert c.swingweight_points_u == pytest.approx(2 * 0.5 * 14.9 / (1.75 * 28.349523125))
    # BP read on a knife edge does not depend on W: its inputs carry no uncertainty, so no
    # _u at all (issue 2: a _u "beside each value whose inputs carry one"), not a "± 0".
    assert c.balance_point_in_u is None


def test_knife_edge_errors_cost_more_than_a_point_on_a_driver() -> None:
    # One gram scale plus a knife-edge balance point: a 3 g weight error or a 1/4 in BP error
    # each cost more than one point (tutelman.com/golf/design/swingwt4.php). Driver: 310 g, 34 in.
    w = club_from_weight_and_balance(U(310.0, 3.0), U(34.0))
    bp = club_from_weight_and_balance(U(310.0), U(34.0, 0.25))
    assert w.swingweight_points_u is not None and bp.swingweight_points_u is not None
    assert w.swingweight_points_u / 2 > 1.0
    assert bp.swingweight_points_u / 2 > 1.0


def test_methods_agree_on_one_club() -> None:
    # A 412 g club with BP 29.1 in read three ways (statics: all must give the same numbers).
    # Its label, by hand: 412 g * 15.1 in = 219.45 oz*in; (219.45 - 161) / 1.75 = 33.4 points
    # = D3.4 (trade tables, japanese.yujigolf.com/2012/01/blog-post_10.html).
    w, bp = 412.0, 29.1
    fb = w * (bp - 4.0) / 32.0  # supports at 4 and 36 in
    by_supports = club_from_two_supports(U(w - fb), U(4.0), U(fb), U(36.0))
    by_lever = club_from_lever(U(w * (bp - 14.0) / 5.0), U(5.0), U(w))
    direct = club_from_weight_and_balance(U(w), U(bp))
    for c in (by_supports, by_lever):
        assert c.total_weight_g == pytest.approx(direct.total_weight_g)
        assert c.balance_point_in == pytest.approx(direct.balance_point_in)
        assert c.swingweight == direct.swingweight == "D3.4"


def test_off_scale_clubs_still_get_numbers_and_a_clear_label() -> None:
    # 150 g * 6 in = 31.7 oz*in, far below A0 = 161; 600 g * 20 in = 423 oz*in, far above
    # G10 = 161 + 70 * 1.75 = 283.5 oz*in (trade tables, as above).
    light = club_from_weight_and_balance(U(150.0), U(20.0))
    assert light.swingweight == "<A0" and light.swingweight_points < 0
    heavy = club_from_weight_and_balance(U(600.0), U(34.0))
    assert heavy.swingweight == ">G10" and heavy.swingweight_points > 70


def test_other_fulcrum_keeps_swing_weight_on_14_in() -> None:
    c14 = club_from_weight_and_balance(U(412.0), U(29.1))
    c12 = club_from_weight_and_balance(U(412.0), U(29.1), fulcrum_in=12.0)
    assert c12.moment_g_in == pytest.approx(412.0 * 17.1)
    assert c12.swingweight_points == pytest.approx(c14.swingweight_points)


def test_zero_weight_is_refused() -> None:
    with pytest.raises(StaticsError):
        club_from_weight_and_balance(U(0.0), U(29.0))


def test_balance_point_never_picks_up_the_weighings_u_by_rounding() -> None:
    # A knife-edge BP does not depend on W (statics), yet BP = 14 + W*(BP - 14)/W rounds
    # differently as W moves (207.6 g at 28.12 in does); that noise must not become a _u.
    c = club_from_weight_and_balance(U(207.6, 0.05), U(28.12))
    assert c.balance_point_in_u is None
    assert c.total_weight_g_u is not None
