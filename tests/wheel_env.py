"""Build the checkout into a wheel and install it into a clean venv (tests and benchmarks).

A copy of the checkout (code and metadata only) is built with ``pip wheel`` under build
isolation, the way ``pip install ./heft`` builds it, then installed with its dependencies into a
new venv. Commands then run from a folder unrelated to the checkout, so nothing of the checkout is
on the path.
"""

from __future__ import annotations

import os
import shutil
import subprocess
import sys
import venv
from dataclasses import dataclass
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
COPY_IGNORE = shutil.ignore_patterns(
    ".git", ".venv", "build", "*.egg-info", "__pycache__", ".mypy_cache", ".ruff_cache",
    ".hypothesis", "tests", "hardware_fixtures", "docs",
)  # fmt: skip


@dataclass(frozen=True)
class Installed:
    """A clean venv with the wheel installed, and an unrelated folder to run commands in."""

    bin: Path
    wheel: Path
    cwd: Path

    @property
    def env(self) -> dict[str, str]:
        env = {k: v for k, v in os.environ.items() if not k.startswith(("PYTHON", "VIRTUAL_ENV"))}
        env["PATH"] = f"{self.bin}{os.pathsep}{env.get('PATH', '')}"
        return env

    def heft(
        self, *args: str, stdin: str | None = None, timeout_s: float = 120
    ) -> subprocess.CompletedProcess[str]:
        return subprocess.run(
            [str(self.bin / "heft"), *args], input=stdin, capture_output=True, text=True,
            timeout=timeout_s, cwd=self.cwd, env=self.env, check=False,
        )  # fmt: skip

    def start(self, *args: str) -> subprocess.Popen[str]:
        return subprocess.Popen(
            [str(self.bin / "heft"), *args], cwd=self.cwd, env=self.env, text=True,
            stdout=subprocess.DEVNULL, stderr=subprocess.PIPE,
        )  # fmt: skip


class WheelError(RuntimeError):
    """Building or installing the wheel failed; the message carries pip's output."""


def _run(argv: list[str], what: str) -> None:
    done = subprocess.run(argv, capture_output=True, text=True, timeout=900, check=False)
    if done.returncode != 0:
        raise WheelError(f"{what} failed (exit {done.returncode}):\n{done.stdout}{done.stderr}")


def install_wheel(base: Path) -> Installed:
    """Build the wheel from a copy of the checkout and install it into ``base/venv``."""
    source = base / "source"
    shutil.copytree(ROOT, source, ignore=COPY_IGNORE, symlinks=True)
    dist = base / "dist"
    _run([sys.executable, "-m", "pip", "wheel", "--no-deps", "--quiet", "-w", str(dist),
          str(source)], "pip wheel")  # fmt: skip
    (wheel,) = dist.glob("heft-*.whl")
    env_dir = base / "venv"
    venv.EnvBuilder(with_pip=True).create(env_dir)
    _run([str(env_dir / "bin" / "python"), "-m", "pip", "install", "--quiet", str(wheel)],
         "pip install of the wheel")  # fmt: skip
    elsewhere = base / "elsewhere"
    elsewhere.mkdir()
    return Installed(bin=env_dir / "bin", wheel=wheel, cwd=elsewhere)
