"""Capture parameters: the ``[capture]`` table of the station config.

Every figure the capture engine (``daemon.capture``) decides with lives here, with a default that
suits an HX711 load-cell rig at 10 samples/s. Presets give a starting point for the other rigs;
a config may name a preset and override single fields::

    [capture]
    preset_name = "hx711_80hz"
    division_g = 0.05

Weighing-practice bounds (source named beside each): stable equilibrium within +/-1 d for at
least 0.4 s (OIML R 76-1 4.4.2), zero tracking at most 0.5 d/s and within 4 % of capacity
(OIML R 76-1 4.5.7, 4.5.1), no weight above capacity + 9 d (OIML R 76-1 4.2.3).
"""

from __future__ import annotations

from typing import Any, Literal, Self, TypeVar

from pydantic import BaseModel, ConfigDict, Field, field_validator, model_validator

from heft.drivers.reading import ChannelRef

_V = TypeVar("_V")


def keyed_by_channel(table: dict[str, _V]) -> dict[str, _V]:
    """``table`` when every key is a channel reference text (ChannelRefError names the first
    that is not): config tables keyed by channel keep their text keys, checked once here."""
    for name in table:
        ChannelRef.parse(name)
    return table

PresetName = Literal["hx711_10hz", "hx711_80hz", "precision_balance"]
DeviceFlagMode = Literal["ignore", "veto", "require", "trust"]

# Preset values are starting points for typical rigs, not calibrations: the noise figures are
# from memory of HX711 boards with a 1 kg bar cell (about 0.05 g rms at 10 samples/s, about
# three times that at 80) and of 0.01 g precision balances; the engine learns the real noise
# while the supports are empty (``learn_noise``).
_PRESETS: dict[str, dict[str, Any]] = {
    "hx711_10hz": {
        "division_g": 0.1,
        "capacity_g": 1000.0,
        "noise_g": 0.05,
        "max_window_s": 3.0,
        "settle_timeout_s": 6.0,
    },
    "hx711_80hz": {
        "division_g": 0.1,
        "capacity_g": 1000.0,
        "noise_g": 0.15,
        "max_window_s": 2.0,
        "settle_timeout_s": 5.0,
    },
    "precision_balance": {
        "division_g": 0.01,
        "capacity_g": 620.0,
        "noise_g": 0.005,
        "max_window_s": 3.0,
        "settle_timeout_s": 6.0,
        "device_flags": "veto",
    },
}


class ChannelOverrides(BaseModel):
    """Per-channel values where the devices of one station differ (e.g. a cell and a balance)."""

    model_config = ConfigDict(extra="forbid", frozen=True)

    division_g: float | None = Field(
        default=None, gt=0, description="display step d of this channel, g"
    )
    capacity_g: float | None = Field(
        default=None, gt=0, description="maximum capacity (Max) of this channel, g"
    )
    noise_g: float | None = Field(
        default=None, gt=0, description="initial noise estimate (rms) of this channel, g"
    )
    device_flags: DeviceFlagMode | None = Field(
        default=None, description="how this channel's own STABLE/MOTION flags are used"
    )


class CaptureParams(BaseModel):
    """When a club counts as placed, settled, captured and removed; zero tracking bounds."""

    model_config = ConfigDict(extra="forbid", frozen=True)

    preset_name: PresetName | None = Field(
        default=None,
        description="start from a preset (hx711_10hz, hx711_80hz, precision_balance); "
        "fields given beside it override the preset",
    )

    # The scale itself.
    division_g: float = Field(default=0.1, gt=0, description="display step d, g (all channels)")
    capacity_g: float = Field(
        default=1000.0,
        gt=0,
        description="maximum capacity per channel, g; above capacity + 9 d "
        "a reading is an overload (OIML R 76-1 4.2.3)",
    )
    noise_g: float = Field(
        default=0.05, gt=0, description="initial estimate of a channel's reading noise (rms), g"
    )
    learn_noise: bool = Field(
        default=True,
        description="refine the noise estimate while the supports are empty and stable",
    )

    # Placement and removal.
    placement_threshold_g: float = Field(
        default=20.0,
        gt=0,
        description="total load on the geometry's channels that counts as a placement, g",
    )
    empty_threshold_g: float = Field(
        default=5.0, gt=0, description="total load below which the supports count as empty again, g"
    )

    # Stability.
    min_stable_s: float = Field(
        default=0.4,
        gt=0,
        description="shortest stable window, s; every channel's windows must overlap "
        "for at least this long (OIML R 76-1 4.4.2: +/-1 d for at least 0.4 s)",
    )
    max_window_s: float = Field(
        default=3.0, gt=0, description="longest window the engine averages over, s"
    )
    max_drift_d: float = Field(
        default=1.0, gt=0, description="largest change of the fitted trend across a window, in d"
    )
    resolution_d: float = Field(
        default=0.5, gt=0, description="required standard error of a window's mean, in d"
    )
    motion_confidence: float = Field(
        default=0.999,
        gt=0.5,
        lt=1.0,
        description="confidence of the test that a window's scatter "
        "is noise, not motion (higher: fewer false motion calls, slower to notice motion)",
    )
    max_gap_s: float = Field(
        default=0.5,
        gt=0,
        description="a gap between a channel's samples longer than this restarts its window, s",
    )
    device_flags: DeviceFlagMode = Field(
        default="veto",
        description="a device's own STABLE/MOTION flags: ignore; veto (MOTION on the latest "
        "reading blocks a capture); require (STABLE needed as well as the engine's test); "
        "trust (STABLE alone is enough, MOTION blocks)",
    )

    # Timeouts.
    settle_timeout_s: float = Field(
        default=6.0,
        gt=0,
        description="warn 'will_not_settle' this long after a placement without capture, s",
    )
    capture_after_timeout: bool = Field(
        default=True,
        description="still capture if the club settles after the will-not-settle warning",
    )
    channel_timeout_s: float = Field(
        default=2.0, gt=0, description="a channel silent this long puts the engine OFFLINE, s"
    )

    # Zero tracking (OIML R 76-1 4.5.7 and 4.5.1).
    zero_tracking: bool = Field(
        default=True, description="follow slow zero drift while empty and stable"
    )
    zero_tracking_band_d: float = Field(
        default=0.5,
        gt=0,
        le=5.0,
        description="track only while the empty reading is within this many d of zero",
    )
    zero_tracking_rate_d_per_s: float = Field(
        default=0.5,
        gt=0,
        le=0.5,
        description="largest correction rate, d/s (OIML R 76-1 4.5.7: 0.5 d/s)",
    )
    zero_tracking_limit_fraction: float = Field(
        default=0.04,
        gt=0,
        le=0.04,
        description="largest total tracking correction as a fraction of "
        "capacity (OIML R 76-1 4.5.1: 4 %)",
    )
    zero_tracking_window_s: float = Field(
        default=1.0, gt=0, description="stable empty window needed before a tracking correction, s"
    )

    per_channel: dict[str, ChannelOverrides] = Field(
        default_factory=dict, description="overrides keyed by channel name such as 'beam/0'"
    )

    @field_validator("per_channel")
    @classmethod
    def _channel_names(cls, value: dict[str, ChannelOverrides]) -> dict[str, ChannelOverrides]:
        return keyed_by_channel(value)

    @model_validator(mode="before")
    @classmethod
    def _apply_preset(cls, data: Any) -> Any:
        if isinstance(data, dict) and data.get("preset_name") is not None:
            name = data["preset_name"]
            if name not in _PRESETS:
                return data  # the Literal check names the field and the allowed values
            return {**_PRESETS[name], **data}
        return data

    @model_validator(mode="after")
    def _check_consistency(self) -> Self:
        if self.empty_threshold_g >= self.placement_threshold_g:
            raise ValueError(
                f"empty_threshold_g ({self.empty_threshold_g}) must be below "
                f"placement_threshold_g ({self.placement_threshold_g})"
            )
        if self.max_window_s < self.min_stable_s:
            raise ValueError(
                f"max_window_s ({self.max_window_s}) must be at least "
                f"min_stable_s ({self.min_stable_s})"
            )
        return self

    @classmethod
    def preset_names(cls) -> tuple[str, ...]:
        return tuple(_PRESETS)

    @classmethod
    def preset(cls, name: str, **overrides: Any) -> CaptureParams:
        """Parameters of a named preset, with ``overrides`` applied on top."""
        if name not in _PRESETS:
            raise ValueError(f"unknown capture preset {name!r}; expected one of {sorted(_PRESETS)}")
        return cls.model_validate({"preset_name": name, **overrides})

    # Per-channel look-ups (fall back to the station-wide values).
    def division_for(self, channel: str) -> float:
        o = self.per_channel.get(channel)
        return o.division_g if o is not None and o.division_g is not None else self.division_g

    def capacity_for(self, channel: str) -> float:
        o = self.per_channel.get(channel)
        return o.capacity_g if o is not None and o.capacity_g is not None else self.capacity_g

    def noise_for(self, channel: str) -> float:
        o = self.per_channel.get(channel)
        return o.noise_g if o is not None and o.noise_g is not None else self.noise_g

    def device_flags_for(self, channel: str) -> DeviceFlagMode:
        o = self.per_channel.get(channel)
        return o.device_flags if o is not None and o.device_flags is not None else self.device_flags

    def overload_limit_for(self, channel: str) -> float:
        """Largest value that is still a weight: capacity + 9 d (OIML R 76-1 4.2.3)."""
        return self.capacity_for(channel) + 9.0 * self.division_for(channel)
