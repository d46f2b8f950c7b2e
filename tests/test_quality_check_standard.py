"""Check standard: is the latest check in control, and since which check are results suspect.

Acceptance limit: combined expanded uncertainty sqrt(U_ref^2 + U_reading^2), i.e. E_n <= 1
(ISO 13528:2015, E_n numbers; from memory). Chart: individuals chart centred on the known value
(Montgomery, control chart for individuals; d2 = 1.128 for n = 2, ASTM MNL 7A).
"""

from __future__ import annotations

import pytest

from heft.daemon.quality.check_standard import check_by_acceptance, check_by_chart
from heft.daemon.quality.inputs import QualityInputError

KNOWN_G = 100.0


def test_acceptance_in_control_and_on_the_limit() -> None:
    # U_c = sqrt(0.3^2 + 0.4^2) = 0.5; 100.5 is exactly on the limit: accepted.
    result = check_by_acceptance(KNOWN_G, 0.3, 0.4, [100.1, 99.8, 100.5])
    assert result.acceptance_limit == pytest.approx(0.5)
    assert result.normalised_errors == pytest.approx((0.2, 0.4, 1.0))
    status = result.status
    assert status.in_control and status.last_good_index == 2 and status.reasons == ()
    assert status.suspect_from_index is None


def test_acceptance_out_of_control_names_the_last_good_check() -> None:
    result = check_by_acceptance(KNOWN_G, 0.3, 0.4, [100.1, 100.9, 100.4, 100.6, 100.7])
    status = result.status
    assert not status.in_control and status.latest_index == 4
    assert status.last_good_index == 2 and status.suspect_from_index == 3
    assert result.normalised_errors[-1] == pytest.approx(1.4)
    assert status.reasons == (
        "reading 100.7 differs from the known value 100 by 0.7, more than the acceptance "
        "limit 0.5 (E_n 1.40)",
    )


def test_acceptance_with_no_good_check_suspects_everything() -> None:
    status = check_by_acceptance(KNOWN_G, 0.3, 0.4, [101.0, 101.0]).status
    assert not status.in_control and status.last_good_index is None
    assert status.suspect_from_index == 0


def test_chart_point_beyond_three_sigma() -> None:
    result = check_by_chart(50.0, [50.0, 50.05, 49.95, 50.0, 50.35], sigma=0.1)
    status = result.status
    assert not status.in_control and status.last_good_index == 3
    assert status.reasons == ("rule 1 (one point beyond 3 sigma) at point 4",)


def test_chart_drift_is_traced_back_to_where_it_began() -> None:
    # three checks around the value, then nine on the high side: rule 2 breaks at the ninth,
    # but the bias began with the first of the nine, so the last good check is index 2.
    readings = [49.95, 50.05, 49.95] + [50.05] * 9
    status = check_by_chart(50.0, readings, sigma=0.1).status
    assert not status.in_control and status.latest_index == 11
    assert status.last_good_index == 2 and status.suspect_from_index == 3
    assert any("rule 2" in reason for reason in status.reasons)


def test_chart_trace_reaches_through_older_flags() -> None:
    # 2 of 3 beyond 2 sigma at index 4 and again at 5: both flags count back to index 3.
    readings = [50.0, 49.99, 50.01, 50.25, 50.26, 50.27]
    status = check_by_chart(50.0, readings, sigma=0.1, rules=[5]).status
    assert not status.in_control and status.last_good_index == 2


def test_chart_in_control() -> None:
    result = check_by_chart(50.0, [50.0, 50.05, 49.95, 50.0], sigma=0.1)
    assert result.status.in_control and result.status.last_good_index == 3


def test_chart_sigma_from_a_baseline_of_checks() -> None:
    # baseline 50.0, 50.2, 50.1: MR 0.2, 0.1, MR-bar 0.15, sigma = 0.15 / 1.128 = 0.13298
    readings = [50.0, 50.2, 50.1, 50.45]
    result = check_by_chart(50.0, readings, baseline_count=3)
    assert result.limits.centre == 50.0
    assert result.limits.sigma == pytest.approx(0.15 / 1.128)
    # 50.45 is 0.45 / 0.13298 = 3.38 sigma above the known value: rule 1
    assert not result.status.in_control and result.status.last_good_index == 2
    assert result.status.reasons == ("rule 1 (one point beyond 3 sigma) at point 3",)


def test_chart_trace_joins_a_flag_just_before_the_pattern() -> None:
    # index 0 beyond 3 sigma; then nine on the high side (indices 1-9) break rule 2 at 9. The
    # pattern starts right after a flagged check, so no check before the stretch was good.
    readings = [50.35] + [50.05] * 9
    status = check_by_chart(50.0, readings, sigma=0.1, rules=[1, 2]).status
    assert not status.in_control and status.last_good_index is None
    assert status.suspect_from_index == 0


@pytest.mark.parametrize(
    ("call", "message"),
    [
        (lambda: check_by_chart(50.0, [50.0, 50.1]), "sigma, baseline_count"),
        (lambda: check_by_chart(50.0, [50.0, 50.1], baseline_count=3), "baseline_count"),
        (lambda: check_by_chart(50.0, [], sigma=0.1), "readings"),
        (lambda: check_by_chart(50.0, [50.0], sigma=-1.0), "sigma"),
        (lambda: check_by_acceptance(50.0, 0.0, 0.0, [50.0]), "not both zero"),
        (lambda: check_by_acceptance(50.0, 0.1, float("nan"), [50.0]), "reading_expanded"),
        (lambda: check_by_acceptance(float("inf"), 0.1, 0.1, [50.0]), "known_value"),
    ],
)
def test_bad_input_is_refused(call: object, message: str) -> None:
    with pytest.raises(QualityInputError, match=message):
        call()  # type: ignore[operator]
