"""Capture parameters: presets, overrides, and clear messages for bad values."""

from __future__ import annotations

import pytest
from pydantic import ValidationError

from heft.daemon.capture_params import CaptureParams


def test_defaults_follow_the_weighing_rules() -> None:
    p = CaptureParams()
    assert p.min_stable_s == 0.4  # OIML R 76-1 4.4.2 via domain.md: +/-1 d for at least 0.4 s
    assert p.max_drift_d == 1.0
    assert p.zero_tracking_rate_d_per_s <= 0.5  # OIML R 76-1 4.5.7
    assert p.zero_tracking_limit_fraction <= 0.04  # OIML R 76-1 4.5.1
    # overload above capacity + 9 d (OIML R 76-1 4.2.3): 1000 g + 9 * 0.1 g
    assert p.overload_limit_for("beam/0") == pytest.approx(1000.9)


@pytest.mark.parametrize("name", CaptureParams.preset_names())
def test_every_preset_is_valid_and_named(name: str) -> None:
    p = CaptureParams.preset(name)
    assert p.preset_name == name
    assert p.model_validate(p.model_dump()) == p  # round-trips through the config form


def test_preset_with_overrides_and_from_a_config_table() -> None:
    p = CaptureParams.model_validate({"preset_name": "hx711_80hz", "division_g": 0.05})
    assert p.division_g == 0.05
    assert p.noise_g == CaptureParams.preset("hx711_80hz").noise_g
    assert CaptureParams.preset("precision_balance").division_g == 0.01


def test_per_channel_overrides() -> None:
    p = CaptureParams.model_validate(
        {"per_channel": {"bal/0": {"division_g": 0.01, "capacity_g": 220, "device_flags": "trust"}}}
    )
    assert p.division_for("bal/0") == 0.01 and p.division_for("beam/0") == 0.1
    assert p.overload_limit_for("bal/0") == pytest.approx(220.09)
    assert p.device_flags_for("bal/0") == "trust" and p.device_flags_for("beam/0") == "veto"


@pytest.mark.parametrize(
    ("data", "names"),
    [
        ({"preset_name": "hx711_5hz"}, "preset_name"),
        ({"zero_tracking_rate_d_per_s": 1.0}, "zero_tracking_rate_d_per_s"),
        ({"zero_tracking_limit_fraction": 0.1}, "zero_tracking_limit_fraction"),
        ({"empty_threshold_g": 30.0}, "placement_threshold_g"),
        ({"max_window_s": 0.2}, "min_stable_s"),
        ({"division_g": 0}, "division_g"),
        ({"min_stable": 0.4}, "min_stable"),
    ],
)
def test_bad_values_name_the_field(data: dict[str, object], names: str) -> None:
    with pytest.raises(ValidationError, match=names):
        CaptureParams.model_validate(data)


def test_unknown_preset_by_name() -> None:
    with pytest.raises(ValueError, match="unknown capture preset 'x'"):
        CaptureParams.preset("x")
