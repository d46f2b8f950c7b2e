"""A real Mosquitto broker on a free loopback port, started and stopped by the tests."""

from __future__ import annotations

import shutil
import socket
import subprocess
import time
from dataclasses import dataclass
from pathlib import Path

from tests.processes import stop_processes


def find_mosquitto() -> str:
    candidates = (shutil.which("mosquitto"), "/usr/sbin/mosquitto", "/usr/local/sbin/mosquitto")
    for candidate in candidates:
        if candidate and Path(candidate).exists():
            return candidate
    raise RuntimeError(
        "the tests need the 'mosquitto' broker binary (Debian: apt-get install mosquitto); "
        "./dev test installs it when run as root"
    )


def free_port() -> int:
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


@dataclass
class Broker:
    """A Mosquitto process; ``stop()``/``start()`` keep the same port so clients can reconnect."""

    workdir: Path
    port: int
    process: subprocess.Popen[bytes] | None = None
    host: str = "127.0.0.1"
    extra_conf: str = ""  # appended to the config; later lines override (e.g. "persistence true")

    @property
    def url(self) -> str:
        return f"mqtt://{self.host}:{self.port}"

    def start(self) -> None:
        conf = self.workdir / "mosquitto.conf"
        conf.write_text(
            f"listener {self.port} 127.0.0.1\n"
            "allow_anonymous true\n"
            # Started as root, mosquitto would switch to its own user and then fail, silently, to
            # write its log and persistence files in the test's private folder. (No effect when
            # not started as root.)
            "user root\n"
            "persistence false\n"
            "max_queued_messages 100000\n"
            f"log_dest file {self.workdir / 'mosquitto.log'}\n"
            f"{self.extra_conf}"
        )
        self.process = subprocess.Popen(
            [find_mosquitto(), "-c", str(conf)],
            stdout=subprocess.DEVNULL,
            stderr=subprocess.DEVNULL,
        )
        deadline = time.monotonic() + 10
        while time.monotonic() < deadline:
            try:
                with socket.create_connection((self.host, self.port), timeout=0.2):
                    return
            except OSError:
                if self.process.poll() is not None:
                    raise RuntimeError(f"mosquitto exited with {self.process.returncode}") from None
                time.sleep(0.05)
        raise RuntimeError(f"mosquitto did not listen on {self.port} within 10 s")

    def stop(self, kill: bool = False) -> None:
        if self.process is None:
            return
        if kill:
            self.process.kill()
        stop_processes([self.process], timeout_s=5)
        self.process = None
