"""The distribution's package list (pyproject.toml) covers every package folder, under ``heft``."""

from __future__ import annotations

import tomllib
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent


def _declared() -> tuple[set[str], dict[str, str]]:
    config = tomllib.loads((ROOT / "pyproject.toml").read_text(encoding="utf-8"))["tool"]
    return set(config["setuptools"]["packages"]), config["setuptools"]["package-dir"]


def test_every_package_folder_is_listed() -> None:
    packages, package_dir = _declared()
    on_disk: set[str] = set()
    for name, folder in package_dir.items():
        for init in (ROOT / folder).rglob("__init__.py"):
            rel = init.parent.relative_to(ROOT / folder).parts
            on_disk.add(".".join([name, *rel]))
    missing = sorted(on_disk - packages)
    assert not missing, f"add to [tool.setuptools] packages in pyproject.toml: {missing}"


def test_every_listed_package_exists_and_lives_under_heft() -> None:
    packages, package_dir = _declared()
    for name in packages:
        assert name.startswith("heft."), f"{name}: install under the heft namespace"
        root = next(k for k in package_dir if name == k or name.startswith(k + "."))
        below = name[len(root) + 1 :].split(".") if name != root else []
        folder = ROOT / package_dir[root] / Path(*below)
        assert folder.is_dir(), f"{name}: no folder {folder}"
