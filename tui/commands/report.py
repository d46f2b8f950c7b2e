"""``heft report``: a set/job record to hand over, as a self-contained HTML page or a PDF."""

from __future__ import annotations

import argparse
import sys
from datetime import UTC, datetime, tzinfo
from pathlib import Path
from typing import TYPE_CHECKING, Any

from heft.tui.commands._cli_io import print_error

if TYPE_CHECKING:
    from heft.daemon.report.model import Report

FORMATS = ("html", "pdf")
_SUFFIXES = {".html": "html", ".htm": "html", ".pdf": "pdf"}
_TIME_FORM = "an ISO 8601 date or time, e.g. 2026-11-30 or 2026-11-30T14:00"


def register(subparsers: Any) -> None:
    parser = subparsers.add_parser(
        "report",
        help="write a job's record (clubs, plots, calibration chain) as HTML or PDF",
        description=(
            "Write a report of stored measurements that a QC lead can print or send: one row "
            "per club with its uncertainties and targets, a summary, plots and the calibration "
            "chain behind the numbers. Times without a zone are in --tz; --since is "
            "inclusive, --until exclusive."
        ),
    )
    parser.add_argument("--db", type=Path, metavar="FILE", required=True,
                        help="the station's SQLite file")
    parser.add_argument("-o", "--output", type=Path, metavar="OUT", required=True,
                        help="OUT.html or OUT.pdf")
    parser.add_argument("--format", choices=FORMATS, help="default: from the --output suffix")
    parser.add_argument("--job", help="only this job")
    parser.add_argument("--station", help="only this station")
    parser.add_argument("--since", metavar="TIME", help=f"from this time ({_TIME_FORM})")
    parser.add_argument("--until", metavar="TIME", help="up to, not including, this time")
    parser.add_argument("--tz", metavar="ZONE", default="UTC",
                        help="the station's time zone, e.g. Europe/London (default UTC)")
    parser.set_defaults(func=_report, _parser=parser)


def _zone(parser: argparse.ArgumentParser, name: str) -> tzinfo:
    from zoneinfo import ZoneInfo, ZoneInfoNotFoundError

    try:
        return ZoneInfo(name)
    except (ZoneInfoNotFoundError, ValueError):
        parser.error(f"argument --tz: expected an IANA time zone such as UTC or "
                     f"Europe/London, got {name!r}")


def _time(parser: argparse.ArgumentParser, option: str, text: str, tz: tzinfo) -> datetime:
    try:
        value = datetime.fromisoformat(text)
    except ValueError:
        parser.error(f"argument --{option}: expected {_TIME_FORM}, got {text!r}")
    return value if value.tzinfo is not None else value.replace(tzinfo=tz)


def _format(parser: argparse.ArgumentParser, args: argparse.Namespace) -> str:
    if args.format is not None:
        return str(args.format)
    fmt = _SUFFIXES.get(args.output.suffix.lower())
    if fmt is None:
        parser.error(f"argument -o/--output: cannot tell the format of {args.output.name!r}; "
                     "name it .html or .pdf, or give --format (html, pdf)")
    return fmt


def _report(args: argparse.Namespace) -> int:
    parser: argparse.ArgumentParser = args._parser
    tz = _zone(parser, args.tz)
    since = _time(parser, "since", args.since, tz) if args.since is not None else None
    until = _time(parser, "until", args.until, tz) if args.until is not None else None
    if since is not None and until is not None and until <= since:
        parser.error("argument --until: expected a time after --since")
    fmt = _format(parser, args)
    if not args.db.is_file():
        parser.error(f"argument --db: no database file at {args.db}")
    if not args.output.parent.is_dir():
        parser.error(f"argument -o/--output: no folder {args.output.parent}")

    from heft.daemon.report.gather import report_from_store
    from heft.daemon.storage import StorageError, Store
    from heft.daemon.version import __version__

    try:
        with Store(args.db) as store:
            report = report_from_store(
                store, tz=tz, tz_name=args.tz, generated_utc=datetime.now(UTC),
                generator=__version__, job=args.job,
                station=args.station, since=since, until=until,
            )
    except StorageError as err:
        print_error("report", err)
        return 1
    if report is None:
        chosen = ", ".join(
            f"--{name} {value}"
            for name in ("job", "station", "since", "until")
            if (value := getattr(args, name)) is not None
        )
        print(f"heft report: no measurements in {args.db}"
              f"{' match ' + chosen if chosen else ''}; nothing to report", file=sys.stderr)
        return 1
    return _write(report, fmt, args.output)


def _write(report: Report, fmt: str, out: Path) -> int:
    from heft.daemon.report.html import render_html

    html = render_html(report)
    try:
        if fmt == "html":
            out.write_text(html, encoding="utf-8")
        else:
            from heft.daemon.report.pdf import PdfError, write_pdf

            try:
                write_pdf(html, out)
            except PdfError as err:
                print_error("report", err)
                return 1
    except OSError as err:
        print(f"heft report: --output: cannot write {out}: {err.strerror}", file=sys.stderr)
        return 1
    s = report.summary
    print(f"heft report: {out} ({fmt}): {s.clubs} club{'s' if s.clubs != 1 else ''}, "
          f"{s.passes} pass, {s.near_limit} near limit, {s.fails} fail")
    return 0
