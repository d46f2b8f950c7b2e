"""systemd's notify protocol: a few datagrams to ``$NOTIFY_SOCKET`` (READY=1, WATCHDOG=1).

Does nothing when the service was not started by systemd with ``Type=notify`` (no socket set).
"""

from __future__ import annotations

import logging
import os
import socket

log = logging.getLogger("heft.sd_notify")


def notify(message: str) -> bool:
    """Send one notify message; True when a socket was there to take it."""
    address = os.environ.get("NOTIFY_SOCKET")
    if not address:
        return False
    if address.startswith("@"):  # abstract namespace socket
        address = "\0" + address[1:]
    try:
        with socket.socket(socket.AF_UNIX, socket.SOCK_DGRAM) as sock:
            sock.connect(address)
            sock.sendall(message.encode())
    except OSError as err:
        log.warning("systemd notify %r failed: %s", message, err)
        return False
    return True


def watchdog_interval_s() -> float | None:
    """Half the watchdog period systemd asked for (WATCHDOG_USEC), or None when not asked."""
    usec = os.environ.get("WATCHDOG_USEC")
    pid = os.environ.get("WATCHDOG_PID")
    if not usec or (pid and pid != str(os.getpid())):
        return None
    try:
        return int(usec) / 2e6
    except ValueError:
        return None
