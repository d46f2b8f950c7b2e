"""The systemd unit and udev rules say what docs/service.md promises (and systemd accepts)."""

from __future__ import annotations

import shutil
import subprocess
from pathlib import Path

import pytest

DEPLOY = Path(__file__).resolve().parent.parent / "deploy"


def directives(text: str) -> dict[str, list[str]]:
    out: dict[str, list[str]] = {}
    for line in text.splitlines():
        if "=" in line and not line.lstrip().startswith(("#", "[")):
            key, _, value = line.partition("=")
            out.setdefault(key.strip(), []).append(value.strip())
    return out


def test_unit_is_notify_with_watchdog_and_allows_serial_and_usb() -> None:
    d = directives((DEPLOY / "heft.service").read_text())
    assert d["Type"] == ["notify"]
    assert int(d["WatchdogSec"][0]) > 0
    assert d["User"] == ["heft"] and "dialout" in d["SupplementaryGroups"][0]
    assert d["StateDirectory"] == ["heft"]
    assert d["PrivateDevices"] == ["no"] and d["DevicePolicy"] == ["closed"]
    allowed = " ".join(d["DeviceAllow"])
    for cls in ("char-ttyUSB", "char-ttyACM", "char-usb_device", "char-hidraw"):
        assert cls in allowed
    assert d["RestartPreventExitStatus"] == ["2"]  # a bad config waits for a person
    assert "heft run --config" in d["ExecStart"][0]


@pytest.mark.skipif(shutil.which("systemd-analyze") is None, reason="no systemd-analyze here")
def test_systemd_accepts_the_unit(tmp_path: Path) -> None:
    unit = tmp_path / "heft.service"
    # Point the executables at one that exists here; everything else is checked as shipped.
    shipped = (DEPLOY / "heft.service").read_text()
    unit.write_text(shipped.replace("/usr/local/bin/heft", "/bin/true"))
    proc = subprocess.run(
        ["systemd-analyze", "verify", str(unit)], capture_output=True, text=True, timeout=60
    )
    problems = [ln for ln in proc.stderr.splitlines() if "heft.service" in ln]
    assert proc.returncode == 0 and not problems, proc.stderr


def test_udev_rules_name_devices_and_keep_modemmanager_off() -> None:
    rules = [
        ln for ln in (DEPLOY / "99-heft.rules").read_text().splitlines()
        if ln.strip() and not ln.startswith("#")
    ]
    tty = [r for r in rules if 'SUBSYSTEM=="tty"' in r]
    assert tty and all('ENV{ID_MM_DEVICE_IGNORE}="1"' in r for r in tty)
    assert all("SYMLINK+=" in r for r in tty)
    assert any('SUBSYSTEM=="usb"' in r and 'GROUP="dialout"' in r for r in rules)  # HID scales
