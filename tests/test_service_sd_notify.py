"""systemd notify: READY=1 and WATCHDOG=1 reach a real unix datagram socket; absent, nothing."""

from __future__ import annotations

import os
import socket
from pathlib import Path

import pytest

from heft.daemon.sd_notify import notify, watchdog_interval_s


def test_notify_reaches_the_socket(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    path = tmp_path / "notify.sock"
    with socket.socket(socket.AF_UNIX, socket.SOCK_DGRAM) as server:
        server.bind(str(path))
        server.settimeout(5)
        monkeypatch.setenv("NOTIFY_SOCKET", str(path))
        assert notify("READY=1")
        assert server.recv(64) == b"READY=1"
        assert notify("WATCHDOG=1")
        assert server.recv(64) == b"WATCHDOG=1"


def test_no_socket_no_message(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.delenv("NOTIFY_SOCKET", raising=False)
    assert not notify("READY=1")


def test_watchdog_interval_is_half_the_period(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setenv("WATCHDOG_USEC", "20000000")
    monkeypatch.setenv("WATCHDOG_PID", str(os.getpid()))
    assert watchdog_interval_s() == 10.0
    monkeypatch.setenv("WATCHDOG_PID", "1")  # meant for another process
    assert watchdog_interval_s() is None
    monkeypatch.delenv("WATCHDOG_USEC")
    assert watchdog_interval_s() is None
