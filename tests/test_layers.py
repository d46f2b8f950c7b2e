"""The layers only point down: every import in heft's own code, read from the source with ``ast``.

From the bottom: readings and units, then the drivers (and simulated devices), then the measuring
core (physics, capture, pipeline, specs, alarms, calibration, config), then the service and its
sinks (storage, MQTT), then the dashboard, with the command line on top. A module may import its
own layer or any layer below; an import of a higher layer (even one inside a function) fails.
"""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent
FOLDERS = {"daemon": "heft.daemon", "drivers": "heft.drivers", "tui": "heft.tui"}

# (layer name, module prefixes), bottom first. The longest matching prefix decides the layer.
LAYERS: tuple[tuple[str, tuple[str, ...]], ...] = (
    (
        "readings and units",
        ("heft.drivers.reading", "heft.drivers.units", "heft.drivers.validation"),
    ),
    ("drivers", ("heft.drivers",)),
    (
        "measuring core",
        (
            "heft.daemon.physics",
            "heft.daemon.calc",
            "heft.daemon.quality",
            "heft.daemon.capture",
            "heft.daemon.capture_params",
            "heft.daemon.capture_channel",
            "heft.daemon.capture_outputs",
            "heft.daemon.stillness",
            "heft.daemon.settling",
            "heft.daemon.pipeline",
            "heft.daemon.club_measure",
            "heft.daemon.selection",
            "heft.daemon.specs",
            "heft.daemon.alarms",
            "heft.daemon.calibration",
            "heft.daemon.measurement",
            "heft.daemon.records",
            "heft.daemon.events",
            "heft.daemon.config",
            "heft.daemon.config_sections",
            "heft.daemon.config_example",
            "heft.daemon.mqtt_settings",
            "heft.daemon.version",
            "heft.daemon.replay",
        ),
    ),
    ("service and sinks", ("heft.daemon", "heft.daemon.plant")),
    ("dashboard", ("heft.tui",)),
    ("command line", ("heft.tui.cli", "heft.tui.commands")),
)


def _layer_of(module: str) -> int:
    best_len, best = -1, -1
    for index, (_, prefixes) in enumerate(LAYERS):
        for prefix in prefixes:
            if (module == prefix or module.startswith(prefix + ".")) and len(prefix) > best_len:
                best_len, best = len(prefix), index
    if best < 0:
        raise AssertionError(f"{module} belongs to no layer; add it to LAYERS")
    return best


def _modules() -> dict[str, Path]:
    found: dict[str, Path] = {}
    for folder, package in FOLDERS.items():
        for path in sorted((ROOT / folder).rglob("*.py")):
            rel = path.relative_to(ROOT / folder)
            if rel.parts[0] == "firmware":  # MicroPython for the board; imports nothing of ours
                continue
            parts = [package, *rel.with_suffix("").parts]
            if parts[-1] == "__init__":
                parts.pop()
            found[".".join(parts)] = path
    return found


def _imports(module: str, path: Path) -> set[str]:
    tree = ast.parse(path.read_text(encoding="utf-8"), filename=str(path))
    is_package = path.name == "__init__.py"
    names: set[str] = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            names.update(alias.name for alias in node.names)
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                base = module.split(".")
                base = base[: len(base) - node.level + (1 if is_package else 0)]
                target = ".".join([*base, node.module] if node.module else base)
            else:
                target = node.module or ""
            names.add(target)
            names.update(f"{target}.{alias.name}" for alias in node.names)
    return {name for name in names if name.startswith("heft.")}


def _known(name: str, modules: dict[str, Path]) -> str | None:
    """The heft module an import name refers to (``from x import name`` may name a symbol)."""
    while name:
        if name in modules:
            return name
        name = name.rpartition(".")[0]
    return None


def test_every_module_has_a_layer() -> None:
    for module in _modules():
        _layer_of(module)


def test_no_import_points_up() -> None:
    modules = _modules()
    upward: list[str] = []
    for module, path in modules.items():
        own = _layer_of(module)
        for name in sorted(_imports(module, path)):
            target = _known(name, modules)
            if target is None:
                continue
            theirs = _layer_of(target)
            if theirs > own:
                upward.append(
                    f"{module} ({LAYERS[own][0]}) imports {target} ({LAYERS[theirs][0]})"
                )
    assert not upward, "imports that point up:\n" + "\n".join(sorted(set(upward)))


def test_the_walk_sees_an_upward_arrow(tmp_path: Path) -> None:
    """The checker itself: a driver module importing the service is reported."""
    bad = tmp_path / "bad.py"
    bad.write_text("def f():\n    from heft.daemon.service import Service\n", encoding="utf-8")
    imports = _imports("heft.drivers.bad", bad)
    assert "heft.daemon.service" in imports
    assert _layer_of("heft.daemon.service") > _layer_of("heft.drivers.bad")


@pytest.mark.parametrize("folder", [*sorted(FOLDERS), "tests"])
def test_no_module_imports_the_bare_folder_names(folder: str) -> None:
    """Code imports ``heft.daemon`` etc., never ``daemon``: the bare names are not installed."""
    offenders = []
    for path in sorted((ROOT / folder).rglob("*.py")):
        if "firmware" in path.parts:
            continue
        tree = ast.parse(path.read_text(encoding="utf-8"))
        for node in ast.walk(tree):
            names: list[str] = []
            if isinstance(node, ast.Import):
                names = [alias.name for alias in node.names]
            elif isinstance(node, ast.ImportFrom) and not node.level and node.module:
                names = [node.module]
            offenders += [
                f"{path.relative_to(ROOT)}:{node.lineno} {name}"
                for name in names
                if name.split(".")[0] in FOLDERS
            ]
    assert not offenders
