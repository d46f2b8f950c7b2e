"""``heft export``: stored measurements as CSV or JSON Lines, filtered by time, job and verdict."""

from __future__ import annotations

import argparse
import sys
from datetime import datetime
from pathlib import Path
from typing import Any

from heft.daemon.export import FORMATS
from heft.daemon.measurement import Verdict
from heft.tui.commands._cli_io import print_error, reader_went_away

_TIME_FORM = "an ISO 8601 date or time, e.g. 2026-11-30 or 2026-11-30T14:00:00Z"


def register(subparsers: Any) -> None:
    parser = subparsers.add_parser(
        "export",
        help="write stored measurements as CSV or JSON Lines",
        description=(
            "Write stored measurements, oldest first. Times without a zone are local time; "
            "--since is inclusive, --until exclusive."
        ),
    )
    source = parser.add_mutually_exclusive_group(required=True)
    source.add_argument(
        "--config", type=Path, metavar="FILE", help="station config (its storage.path)"
    )
    source.add_argument("--db", type=Path, metavar="FILE", help="the station's SQLite file")
    parser.add_argument(
        "--format",
        choices=sorted(FORMATS),
        help="output format (default: from the --output suffix .csv or .jsonl, else csv)",
    )
    parser.add_argument("-o", "--output", type=Path, metavar="FILE", help="default: stdout")
    parser.add_argument("--since", metavar="TIME", help=f"from this time ({_TIME_FORM})")
    parser.add_argument("--until", metavar="TIME", help="up to, not including, this time")
    parser.add_argument("--job", help="only this job")
    parser.add_argument("--verdict", choices=[v.value for v in Verdict], help="only this verdict")
    parser.add_argument("--station", help="only this station")
    parser.set_defaults(func=_export, _parser=parser)


def parse_time(text: str) -> datetime:
    """ISO 8601 date or date-time; without a zone it is local time."""
    value = datetime.fromisoformat(text)
    return value if value.tzinfo is not None else value.astimezone()


def _export(args: argparse.Namespace) -> int:
    parser: argparse.ArgumentParser = args._parser
    since = until = None
    for name in ("since", "until"):
        text = getattr(args, name)
        if text is None:
            continue
        try:
            value = parse_time(text)
        except ValueError:
            parser.error(f"argument --{name}: expected {_TIME_FORM}, got {text!r}")
        if name == "since":
            since = value
        else:
            until = value
    fmt = args.format
    if fmt is None and args.output is not None:
        suffix = args.output.suffix.lstrip(".").lower()
        if suffix not in FORMATS:  # never write CSV into a file named .xlsx
            parser.error(
                f"argument -o/--output: cannot tell the format of {args.output.name!r}; "
                f"name it .csv or .jsonl, or give --format ({', '.join(sorted(FORMATS))})"
            )
        fmt = suffix
    fmt = fmt or "csv"

    db_path: Path = args.db
    if args.config is not None:
        from heft.daemon.config import ConfigError, load_config

        try:
            db_path = load_config(args.config).storage.path
        except ConfigError as err:
            print_error("export", err)
            return 2
    if not db_path.is_file():
        parser.error(f"argument --db: no database file at {db_path}")

    from heft.daemon.storage import StorageError, Store

    try:
        with Store(db_path) as store:
            rows = store.measurements(
                since=since, until=until, job=args.job, verdict=args.verdict, station=args.station
            )
            if args.output is None:
                try:
                    n = FORMATS[fmt](rows, sys.stdout)
                    sys.stdout.flush()
                except BrokenPipeError:
                    reader_went_away()
                    return 0
            else:
                with args.output.open("w", encoding="utf-8", newline="") as out:
                    n = FORMATS[fmt](rows, out)
    except StorageError as err:
        print(f"heft export: {err}", file=sys.stderr)
        return 1
    except OSError as err:
        print(f"heft export: --output: cannot write {args.output}: {err.strerror}", file=sys.stderr)
        return 1
    print(f"heft export: {n} measurement{'s' if n != 1 else ''} ({fmt})", file=sys.stderr)
    return 0
