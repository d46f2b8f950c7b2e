"""Shared fixtures: a real Mosquitto broker per test that wants one."""

from __future__ import annotations

from collections.abc import Iterator
from pathlib import Path

import pytest

from tests.mqtt_broker import Broker, free_port


@pytest.fixture
def broker(tmp_path: Path) -> Iterator[Broker]:
    """A fresh broker on a free loopback port; stopped after the test."""
    b = Broker(workdir=tmp_path, port=free_port())
    b.start()
    try:
        yield b
    finally:
        b.stop()
