"""``heft run --config station.toml``: the bench service, until SIGINT/SIGTERM."""

from __future__ import annotations

import argparse
import asyncio
import contextlib
import logging
import signal
import sys
from pathlib import Path
from typing import Any

from heft.daemon.config import ConfigError, StorageConfig, load_config
from heft.daemon.storage import StorageError
from heft.tui.commands._cli_io import print_error

log = logging.getLogger("heft.run")


def register(subparsers: Any) -> None:
    parser = subparsers.add_parser(
        "run",
        help="run the bench service for a station config",
        description=(
            "Read the station's devices, capture clubs hands-free, store every measurement "
            "in SQLite and publish over MQTT. Stops cleanly on Ctrl-C or SIGTERM."
        ),
    )
    parser.add_argument("--config", required=True, type=Path, help="station config (TOML)")
    parser.add_argument("--db", type=Path, help="SQLite file (overrides [storage] path)")
    parser.add_argument(
        "--record",
        type=Path,
        metavar="DIR",
        help="record every device's bytes to DIR/<device>.jsonl (for heft replay)",
    )
    parser.add_argument(
        "--log-level",
        default="info",
        choices=("debug", "info", "warning", "error"),
        help="log detail on stderr (default: info)",
    )
    parser.set_defaults(func=_run)


async def _serve(service: Any) -> None:
    loop = asyncio.get_running_loop()
    task = asyncio.current_task()
    assert task is not None

    def stop(sig: signal.Signals) -> None:
        log.info("stopping (%s)", sig.name)
        task.cancel()

    for sig in (signal.SIGINT, signal.SIGTERM):
        with contextlib.suppress(NotImplementedError, RuntimeError):
            loop.add_signal_handler(sig, stop, sig)
    with contextlib.suppress(asyncio.CancelledError):
        await service.run()
    log.info("stopped")


def _run(args: argparse.Namespace) -> int:
    logging.basicConfig(
        level=args.log_level.upper(),
        format="%(asctime)s %(levelname)s %(name)s: %(message)s",
        stream=sys.stderr,
    )
    try:
        config = load_config(args.config)
    except ConfigError as err:
        print_error("run", err)
        return 2
    if args.db is not None:
        config = config.model_copy(update={"storage": StorageConfig(path=args.db.resolve())})
    from heft.daemon.service import Service

    service = Service(config, record_dir=args.record)
    try:
        asyncio.run(_serve(service))
    except StorageError as err:
        print(f"heft run: {err}", file=sys.stderr)
        return 1
    return 0
