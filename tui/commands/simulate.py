"""``heft simulate PROTOCOL``: a simulated device on a pseudo-terminal, for testing a set-up.

A club is placed on the simulated bench and lifted again every ``--cycle`` seconds; the device
speaks its protocol on a pty whose path is printed, and keeps serving until Ctrl-C.
"""

from __future__ import annotations

import argparse
import asyncio
import contextlib
import dataclasses
import json
import math
import random
import signal
import sys
import threading
import time
from collections.abc import Callable
from pathlib import Path
from typing import Any

from heft.drivers.reading import Flag, Reading
from heft.drivers.sim.definitions import (
    PROTOCOLS,
    AnyDefinition,
    BeamDef,
    DefinitionError,
    ScannerDef,
    builtin_definition,
    load_definition,
)
from heft.drivers.sim.devices import ScaleDevice, make_device
from heft.drivers.sim.hid_scale import hid_scale_samples
from heft.drivers.sim.physics import (
    BenchTimeline,
    Club,
    Geometry,
    Placement,
    SensorNoise,
    cycle_placements,
    make_geometry,
)
from heft.drivers.sim.pty_server import PtyDevice, check_link_replaceable
from heft.drivers.units import UnitError, parse_quantity

HID = "hid_pos"
# Display exponent of the simulated HID scale per unit: 0.1 g, 0.01 oz, 0.001 lb ...
_HID_EXPONENTS = {"g": -1, "kg": -4, "oz": -2, "lb": -3, "ct": -1}
_DEFAULT_GEOMETRY = {"beam": "two_support"}  # everything else: one scale
_LIST_WIDTH = 16
_UNITS = ("g", "kg", "oz", "lb", "ct")


def _positive_quantity(kind: str) -> Callable[[str], float]:
    """An argparse type: a positive mass (grams) or length (inches) with or without a unit."""

    def parse(text: str) -> float:
        try:
            value = parse_quantity(text, kind=kind)
        except UnitError as err:
            raise argparse.ArgumentTypeError(str(err)) from None
        if value <= 0:
            raise argparse.ArgumentTypeError(f"{text!r} must be a positive {kind}")
        return value

    return parse


_mass = _positive_quantity("mass")
_length = _positive_quantity("length")


def _positive(text: str) -> float:
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a number") from None
    if not (value > 0 and math.isfinite(value)):  # float() also takes "inf"
        raise argparse.ArgumentTypeError(f"{text!r} must be a finite number > 0")
    return value


def _supports(text: str) -> tuple[float, float]:
    parts = text.split(",")
    if len(parts) != 2:
        raise argparse.ArgumentTypeError(f"{text!r} is not two positions such as 4in,36in")
    a, b = (_length(p.strip()) for p in parts)
    if not b > a:
        raise argparse.ArgumentTypeError(f"{text!r}: the second support must be beyond the first")
    return a, b


def register(subparsers: Any) -> None:
    p: argparse.ArgumentParser = subparsers.add_parser(
        "simulate",
        help="run a simulated scale, beam or scanner on a pseudo-terminal",
        description=(
            "Run a simulated device on a pseudo-terminal and print its port path. A club is "
            "placed and lifted every --cycle seconds. Stop with Ctrl-C."
        ),
    )
    p.add_argument(
        "protocol",
        nargs="?",
        metavar="PROTOCOL",
        help=f"one of: {', '.join(PROTOCOLS)} (see --list), or {HID} (read in this process)",
    )
    p.add_argument("--list", action="store_true", help="list the protocols and exit")
    p.add_argument("--definition", type=Path, help="device definition JSON (default: shipped)")
    p.add_argument("--link", type=Path, help="stable symlink to the port, e.g. /tmp/heft/beam0")
    p.add_argument("--seed", type=int, default=0, help="noise and bump seed (default 0)")
    p.add_argument("--rate", type=_positive, metavar="HZ", help="samples per second")
    p.add_argument("--club-weight", type=_mass, default=390.0, metavar="MASS", help="e.g. 390g")
    p.add_argument(
        "--balance-point", type=_length, default=29.5, metavar="LENGTH", help="e.g. 29.5in"
    )
    p.add_argument("--club-id", default="LCW-0001", help="id the scanner reports (numbered on)")
    p.add_argument("--geometry", choices=("two_support", "lever", "single"))
    p.add_argument(
        "--supports", type=_supports, default=(4.0, 36.0), metavar="A,B", help="default 4in,36in"
    )
    p.add_argument("--lever-arm", type=_length, default=5.0, metavar="LENGTH", help="default 5in")
    p.add_argument(
        "--channel", type=int, default=0, help="bench channel a one-channel scale sits under"
    )
    p.add_argument("--unit", choices=_UNITS, help="display unit of a gram scale (default g)")
    p.add_argument("--cycle", type=_positive, default=6.0, metavar="SECONDS", help="default 6")
    p.add_argument("--bump-every", type=int, default=0, metavar="N", help="bump every Nth club")
    p.add_argument("--duration", type=_positive, metavar="SECONDS", help="stop after this long")
    p.set_defaults(func=run, _parser=p)


def list_protocols() -> str:
    lines = []
    for name in PROTOCOLS:
        try:
            desc = builtin_definition(name).description
        except DefinitionError as err:
            desc = f"(definition unusable: {err})"
        lines.append(f"{name:<{_LIST_WIDTH}}{desc}")
    return "\n".join(lines)


def _definition(args: argparse.Namespace, geometry_kind: str) -> AnyDefinition:
    if args.definition is not None:
        return load_definition(args.definition)
    name = str(args.protocol)
    if name == "beam" and geometry_kind != "two_support":
        name = "beam_1ch"
    return builtin_definition(name)


def _geometry(args: argparse.Namespace, kind: str) -> Geometry:
    if kind == "two_support":
        a, b = args.supports
        return make_geometry("two_support", support_a_in=a, support_b_in=b)
    if kind == "lever":
        return make_geometry("lever", lever_arm_in=args.lever_arm)
    return make_geometry("single")


def _fit_definition(definition: AnyDefinition, args: argparse.Namespace) -> AnyDefinition:
    """Apply --rate and --channel to the definition (validated like the file itself)."""
    changes: dict[str, Any] = {}
    if args.rate is not None:
        if isinstance(definition, BeamDef) and round(args.rate) not in definition.allowed_rates_hz:
            rates = " or ".join(str(r) for r in definition.allowed_rates_hz)
            raise DefinitionError(f"--rate: a beam samples at {rates} per second")
        changes["rate_hz"] = args.rate
    if args.channel and not isinstance(definition, BeamDef | ScannerDef):
        changes["bench_channel"] = args.channel
    return definition.model_copy(update=changes) if changes else definition


def _script(args: argparse.Namespace) -> list[Placement]:
    count = int(args.duration / args.cycle) + 2 if args.duration else 100_000
    club = Club(args.club_weight, args.balance_point)
    placements = cycle_placements(
        club,
        period_s=args.cycle,
        on_s=0.6 * args.cycle,
        count=count,
        start_s=min(2.0, 0.3 * args.cycle),
        bump_every=args.bump_every,
        bump_g=0.05 * args.club_weight,
        rng=random.Random(args.seed),
    )
    prefix, _, number = str(args.club_id).rpartition("-")
    if number.isdigit():
        ids = [f"{prefix}-{int(number) + k:0{len(number)}d}" for k in range(count)]
    else:
        ids = [f"{args.club_id}-{k + 1}" for k in range(count)]
    return [
        dataclasses.replace(p, club=dataclasses.replace(club, club_id=cid))
        for p, cid in zip(placements, ids, strict=True)
    ]


def run(args: argparse.Namespace) -> int:
    parser: argparse.ArgumentParser = args._parser
    if args.list:
        print(list_protocols())
        return 0
    if args.protocol is None and args.definition is None:
        parser.error("PROTOCOL is required (or --definition FILE, or --list)")
    if args.protocol == HID:
        return _run_hid(args, parser)
    if args.protocol is not None and args.protocol not in PROTOCOLS:
        parser.error(f"PROTOCOL {args.protocol!r} unknown; expected one of "
                     f"{', '.join(PROTOCOLS)}, {HID}")
    if args.link is not None and not args.link.parent.is_dir():
        parser.error(f"--link: folder {args.link.parent} does not exist")
    if args.link is not None:
        try:
            check_link_replaceable(args.link)
        except FileExistsError as err:
            parser.error(f"--link: {err}")
    if args.bump_every < 0:
        parser.error("--bump-every: expected 0 (never) or a positive count")
    proto = args.protocol or "beam"
    if args.unit is not None and proto in ("beam", "scanner"):
        parser.error(f"--unit: a {proto} has no display unit; only gram scales do")
    kind = args.geometry or _DEFAULT_GEOMETRY.get(proto, "single")
    try:
        definition = _fit_definition(_definition(args, kind), args)
        geometry = _geometry(args, kind)
        timeline = BenchTimeline(geometry, _script(args))
        device = make_device(definition, timeline, seed=args.seed)
        if args.unit is not None and isinstance(device, ScaleDevice):
            device.set_unit(args.unit)
    except (DefinitionError, ValueError) as err:
        print(f"heft simulate: {err}", file=sys.stderr)
        return 2
    if threading.current_thread() is threading.main_thread():
        signal.signal(signal.SIGTERM, _interrupt)  # stop as cleanly as on Ctrl-C
    served = PtyDevice(device, link=args.link)
    try:
        served.start()
        print(f"{definition.protocol} device {definition.name!r} on {served.port}")
        if served.link is not None:
            print(f"link {served.link} -> {served.port}")
        print(f"driver config: {json.dumps(_config_hint(definition, served.path))}")
        print("serving; Ctrl-C to stop", flush=True)
        deadline = time.monotonic() + args.duration if args.duration else None
        while deadline is None or time.monotonic() < deadline:
            time.sleep(0.2)
            if served.error is not None:
                print(f"heft simulate: server stopped: {served.error}", file=sys.stderr)
                return 1
    except KeyboardInterrupt:
        pass
    finally:
        served.close()
    return 0


def _run_hid(args: argparse.Namespace, parser: argparse.ArgumentParser) -> int:
    """Play a simulated HID scale and read it through pyusb, usb-hid:// and ``hid_pos``.

    No other program can open this scale (that would need a kernel USB device), so instead of a
    port this prints what heft reads from it: one line per change of weight or status.
    """
    for option in ("link", "definition", "geometry"):
        if getattr(args, option) is not None:
            parser.error(f"--{option}: a simulated HID scale has no port or definition file; "
                         "it lives inside this process")
    # Imported here: pyusb and the fake backend are only needed for this mode.
    from heft.drivers.fake_usb import SIM_PRODUCT_ID, SIM_VENDOR_ID, fake_scale_backend_from_weights
    from heft.drivers.protocols.hid_pos import HidPosDriver
    from heft.drivers.session import DeviceSession
    from heft.drivers.usb_transport import UsbHidTransport

    unit = args.unit or "g"
    rate_hz = args.rate or 10.0
    horizon_s = args.duration or 100 * args.cycle
    exponent = _HID_EXPONENTS[unit]
    bench = BenchTimeline(make_geometry("single"), _script(args))
    try:
        samples = hid_scale_samples(bench, until_s=horizon_s, rate_hz=rate_hz,
                                    noise=SensorNoise(args.seed, 0.03, 0.0))
        backend = fake_scale_backend_from_weights(samples, unit=unit, exponent=exponent,
                                                  end="hold")
    except ValueError as err:
        print(f"heft simulate: {err}", file=sys.stderr)
        return 2
    transport = UsbHidTransport(SIM_VENDOR_ID, SIM_PRODUCT_ID, backend=backend)
    session = DeviceSession("hid-sim", HidPosDriver("hid-sim"), transport,
                            silence_timeout_s=5.0)
    print(f"{HID}: simulated USB HID scale {SIM_VENDOR_ID:04x}:{SIM_PRODUCT_ID:04x}, read in "
          "this process through pyusb, usb-hid:// and the hid_pos driver")
    print("(no other program can open it: that would need a kernel USB device; see "
          "docs/hid.md)")
    print("serving; Ctrl-C to stop", flush=True)

    async def read() -> None:
        last: tuple[float, Flag] | None = None
        start_s: float | None = None
        # Stopped by cancellation (timeout, Ctrl-C): the session closes the port on its way out.
        async for item in session.outputs():
            if not isinstance(item, Reading) or (item.value, item.flags) == last:
                continue
            last = (item.value, item.flags)
            start_s = item.t_mono_s if start_s is None else start_s
            flags = "|".join(f.name or "" for f in item.flags) or "-"
            print(f"{item.t_mono_s - start_s:8.2f} s  {item.value:9.1f} g  {flags}",
                  flush=True)

    if threading.current_thread() is threading.main_thread():
        signal.signal(signal.SIGTERM, _interrupt)
    with contextlib.suppress(KeyboardInterrupt, TimeoutError):
        asyncio.run(asyncio.wait_for(read(), args.duration))
    return 0


def _interrupt(signum: int, frame: object) -> None:
    raise KeyboardInterrupt


def _config_hint(definition: AnyDefinition, port: str) -> dict[str, Any]:
    hint: dict[str, Any] = {"driver": definition.protocol, "port": port}
    options = getattr(definition, "driver_options", None)
    if options:
        hint["options"] = options
    return hint
