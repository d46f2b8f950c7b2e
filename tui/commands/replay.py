"""``heft replay --config station.toml RECORDING.jsonl ...``: captures as JSON lines."""

from __future__ import annotations

import argparse
import sys
from pathlib import Path
from typing import Any

from heft.daemon.calibration import active_record
from heft.daemon.config import ConfigError, load_config
from heft.daemon.records import CalibrationRecord
from heft.daemon.replay import ReplayError, replay
from heft.daemon.storage import StorageError, Store
from heft.drivers.base import DriverError
from heft.drivers.recording import RecordingError
from heft.tui.commands._cli_io import print_error, reader_went_away


def register(subparsers: Any) -> None:
    parser = subparsers.add_parser(
        "replay",
        help="run recordings through the capture pipeline; one JSON line per measurement",
        description=(
            "Feed recorded device bytes (hardware_fixtures format) through the same pipeline "
            "as 'heft run', in virtual time: no ports, no broker. Prints one JSON line per "
            "captured club with the MQTT payload's fields plus 't', the capture time on the "
            "recording's clock. The same input always gives the same output."
        ),
    )
    parser.add_argument("--config", required=True, type=Path, help="station config (TOML)")
    parser.add_argument("recordings", nargs="+", type=Path, metavar="RECORDING.jsonl")
    parser.add_argument(
        "--calibrations",
        type=Path,
        metavar="DB",
        help="take load-cell calibrations from this database (default: the config's, if it exists)",
    )
    parser.set_defaults(func=_run)


def _calibrations(db: Path | None) -> dict[str, CalibrationRecord]:
    if db is None or not db.exists():
        return {}
    with Store(db) as store:
        records = store.calibrations()
    channels = {r.channel for r in records}
    found = {ch: active_record([r for r in records if r.channel == ch]) for ch in channels}
    return {ch: r for ch, r in found.items() if r is not None}


def _run(args: argparse.Namespace) -> int:
    try:
        config = load_config(args.config)
    except ConfigError as err:
        print_error("replay", err)
        return 2
    for path in args.recordings:
        if not path.is_file():
            print(f"heft replay: {path}: no such recording file", file=sys.stderr)
            return 2
    try:
        calibrations = _calibrations(args.calibrations or config.storage.path)
    except StorageError as err:
        print(f"heft replay: --calibrations: {err}", file=sys.stderr)
        return 2
    try:
        for m in replay(config, args.recordings, calibrations=calibrations):
            sys.stdout.write(m.model_dump_json() + "\n")
            sys.stdout.flush()
    except BrokenPipeError:  # the reader (| head) has what it wanted
        reader_went_away()
        return 0
    except OSError as err:
        where = f"{err.filename}: " if err.filename else ""
        print(f"heft replay: {where}cannot read ({err.strerror})", file=sys.stderr)
        return 2
    except (RecordingError, ReplayError, DriverError) as err:
        print(f"heft replay: {err}", file=sys.stderr)
        return 2
    return 0
