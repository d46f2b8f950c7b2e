"""MQTT connection settings, part of the station config."""

from __future__ import annotations

from pathlib import Path

from pydantic import BaseModel, ConfigDict, Field, SecretStr


class TlsSettings(BaseModel):
    model_config = ConfigDict(extra="forbid")

    ca_file: Path | None = None
    cert_file: Path | None = None
    key_file: Path | None = None
    insecure: bool = Field(default=False, description="skip hostname verification (testing only)")


class MqttSettings(BaseModel):
    model_config = ConfigDict(extra="forbid")

    enabled: bool = True
    host: str = "127.0.0.1"
    port: int = Field(default=1883, ge=1, le=65535)
    username: str | None = None
    password: SecretStr | None = None
    tls: TlsSettings | None = None
    topic_root: str = Field(default="heft", pattern=r"^[^#+\s]+$")
    client_id: str | None = Field(default=None, description="default: heft-<station>")
    keepalive_s: int = Field(default=30, ge=5, le=3600)
    live_max_rate_hz: float = Field(default=5.0, gt=0, le=100)
    commands_enabled: bool = True
    homeassistant_discovery: bool = False
    homeassistant_prefix: str = "homeassistant"
