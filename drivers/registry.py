"""Driver names (as written in the configuration) mapped to driver classes, imported lazily.

Built-in protocols are listed in ``DRIVERS`` as ``"module:Class"`` strings so that importing the
registry does not import every protocol (nor pyusb). Outside packages add drivers through the
entry-point group ``heft.drivers`` (``name = "package.module:Class"``); a built-in name wins.
"""

from __future__ import annotations

import importlib
import importlib.metadata
from collections.abc import Mapping
from typing import Any, Final

from heft.drivers.base import Driver, DriverConfigError, UnknownDriverError

ENTRY_POINT_GROUP: Final = "heft.drivers"

DRIVERS: Final[dict[str, str]] = {
    "poll_balance": "heft.drivers.protocols.poll_balance:PollBalanceDriver",
    "stream_balance": "heft.drivers.protocols.stream_balance:StreamBalanceDriver",
    "regex_line": "heft.drivers.protocols.regex_line:RegexLineDriver",
    "hid_pos": "heft.drivers.protocols.hid_pos:HidPosDriver",
    "beam": "heft.drivers.protocols.beam:BeamDriver",
    "scanner": "heft.drivers.protocols.scanner:ScannerDriver",
}


def _plugin_targets() -> dict[str, str]:
    found: dict[str, str] = {}
    for ep in importlib.metadata.entry_points(group=ENTRY_POINT_GROUP):
        found.setdefault(ep.name, ep.value)
    return found


def available_drivers() -> list[str]:
    """Every usable driver name, built-in and plugged in, sorted."""
    return sorted(set(DRIVERS) | set(_plugin_targets()))


def _load(target: str, name: str) -> type[Driver]:
    module_name, _, attr = target.partition(":")
    try:
        module = importlib.import_module(module_name)
        cls = getattr(module, attr)
    except (ImportError, AttributeError) as err:
        raise DriverConfigError(
            f"driver {name!r} could not be loaded from {target}: {err}") from err
    if not (isinstance(cls, type) and issubclass(cls, Driver)):
        raise DriverConfigError(f"driver {name!r} ({target}) is not a drivers.base.Driver")
    return cls


def get_driver_class(name: str) -> type[Driver]:
    """The driver class registered as ``name``.

    Raises:
        UnknownDriverError: listing the valid names, when ``name`` is not registered.
        DriverConfigError: when the registered module cannot be imported.
    """
    target = DRIVERS.get(name)
    if target is None:
        target = _plugin_targets().get(name)
    if target is None:
        raise UnknownDriverError(
            f"unknown driver {name!r}; valid drivers: {', '.join(available_drivers())}")
    return _load(target, name)


def create_driver(name: str, device: str, options: Mapping[str, Any] | None = None) -> Driver:
    """Build the driver ``name`` for ``device`` with validated ``options``."""
    return get_driver_class(name)(device, options)
