"""A real, throw-away PostgreSQL cluster on a free loopback port, made and removed by the tests.

``initdb`` lays a fresh cluster in a private temporary folder; the server listens on 127.0.0.1 and
on a Unix socket in that same folder (never the system's /var/run/postgresql), so it touches
nothing of an installed PostgreSQL. PostgreSQL refuses to run as root, so when the tests run as
root (CI) the cluster belongs to the unprivileged ``postgres`` system user: ``Popen(user=...)``
switches user in the child before exec, so the process we hold is the server itself and the
SIGINT/SIGKILL of ``stop()`` reach it (a ``runuser`` wrapper would stand in between).
"""

from __future__ import annotations

import contextlib
import os
import pwd
import shutil
import signal
import subprocess
import tempfile
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from tests.mqtt_broker import free_port
from tests.processes import stop_processes

SUPERUSER = "heft_test"  # the cluster's superuser role (initdb -U), trusted on loopback only
UNPRIVILEGED_USER = "postgres"  # runs the server when the tests run as root


def find_postgres_bindir() -> Path:
    """The newest PostgreSQL server binaries: /usr/lib/postgresql/<major>/bin, else PATH."""

    def major(bindir: Path) -> int:
        with contextlib.suppress(ValueError):
            return int(bindir.parent.name)
        return -1

    for bindir in sorted(Path("/usr/lib/postgresql").glob("*/bin"), key=major, reverse=True):
        if (bindir / "initdb").exists() and (bindir / "postgres").exists():
            return bindir
    initdb = shutil.which("initdb")
    if initdb:
        bindir_path = Path(initdb).resolve().parent
        if (bindir_path / "postgres").exists():
            return bindir_path
    raise RuntimeError(
        "the plant tests need the PostgreSQL server binaries (initdb, postgres; "
        "Debian: apt-get install postgresql); ./dev test installs them when run as root"
    )


def _run_as() -> dict[str, Any]:
    """Popen keyword arguments that drop root to the unprivileged user; nothing otherwise."""
    if os.geteuid() != 0:
        return {}
    try:
        pw = pwd.getpwnam(UNPRIVILEGED_USER)
    except KeyError:
        raise RuntimeError(
            f"running as root: PostgreSQL refuses root and there is no '{UNPRIVILEGED_USER}' "
            "user to run it (the Debian postgresql package creates it)"
        ) from None
    return {"user": pw.pw_uid, "group": pw.pw_gid, "extra_groups": []}


@dataclass
class PostgresServer:
    """One cluster: ``init()`` once, then ``start()``/``stop()``; ``remove()`` deletes it all."""

    port: int = field(default_factory=free_port)
    workdir: Path = field(default_factory=lambda: Path(tempfile.mkdtemp(prefix="heft-pg-")))
    process: subprocess.Popen[bytes] | None = None
    host: str = "127.0.0.1"

    @property
    def datadir(self) -> Path:
        return self.workdir / "data"

    @property
    def log_path(self) -> Path:
        return self.workdir / "postgres.log"

    def dsn(self, dbname: str = "postgres") -> str:
        return f"host={self.host} port={self.port} user={SUPERUSER} dbname={dbname}"

    def init(self) -> None:
        """Lay a fresh cluster (UTF-8, C locale, trust on loopback: a test cluster only)."""
        run_as = _run_as()
        if run_as:
            os.chown(self.workdir, run_as["user"], run_as["group"])
        self.workdir.chmod(0o700)
        bindir = find_postgres_bindir()
        result = subprocess.run(
            [
                str(bindir / "initdb"),
                "-D", str(self.datadir),
                "-U", SUPERUSER,
                "--auth=trust",
                "--encoding=UTF8",
                "--locale=C",
                "--no-sync",  # a throw-away cluster: skip the fsyncs, minutes under load
            ],
            cwd=self.workdir,
            capture_output=True,
            timeout=120,
            check=False,
            **run_as,
        )
        if result.returncode != 0:
            raise RuntimeError(
                f"initdb failed ({result.returncode}): {result.stderr.decode(errors='replace')}"
            )

    def start(self, timeout_s: float = 60.0) -> None:
        """Start the server and wait (bounded) until it accepts a session."""
        import psycopg

        bindir = find_postgres_bindir()
        with self.log_path.open("ab") as log:
            self.process = subprocess.Popen(
                [
                    str(bindir / "postgres"),
                    "-D", str(self.datadir),
                    "-p", str(self.port),
                    "-c", f"listen_addresses={self.host}",
                    "-c", f"unix_socket_directories={self.workdir}",
                    "-c", "max_connections=40",
                    "-c", "shared_buffers=16MB",
                    # Test speed only; the plant's own server keeps fsync on.
                    "-c", "fsync=off",
                    "-c", "full_page_writes=off",
                ],
                cwd=self.workdir,
                stdout=subprocess.DEVNULL,
                stderr=log,
                **_run_as(),
            )
        deadline = time.monotonic() + timeout_s
        while True:
            try:
                with psycopg.connect(self.dsn(), connect_timeout=2):
                    return
            except psycopg.OperationalError as err:
                if self.process.poll() is not None:
                    raise RuntimeError(
                        f"postgres exited with {self.process.returncode}: {self._log_tail()}"
                    ) from None
                if time.monotonic() > deadline:
                    self.stop()
                    raise RuntimeError(
                        f"postgres did not accept sessions within {timeout_s:.0f} s: {err}"
                    ) from None
                time.sleep(0.1)

    def stop(self, kill: bool = False) -> None:
        """Fast shutdown (SIGINT: ends sessions, then stops), bounded; SIGKILL as the fallback."""
        proc, self.process = self.process, None
        if proc is None or proc.poll() is not None:
            return
        if kill:
            proc.kill()
        else:
            proc.send_signal(signal.SIGINT)  # SIGTERM would wait for every session to end
            with contextlib.suppress(subprocess.TimeoutExpired):
                proc.wait(timeout=20)
        stop_processes([proc], timeout_s=5)

    def remove(self) -> None:
        self.stop()
        shutil.rmtree(self.workdir, ignore_errors=True)

    def _log_tail(self) -> str:
        try:
            return self.log_path.read_text(errors="replace")[-2000:]
        except OSError:
            return "(no log)"


def create_database(server: PostgresServer, name: str) -> str:
    """A new, empty database on ``server``; returns its connection string."""
    import psycopg
    from psycopg import sql

    with psycopg.connect(server.dsn(), autocommit=True) as conn:
        conn.execute(sql.SQL("CREATE DATABASE {} TEMPLATE template0").format(sql.Identifier(name)))
    return server.dsn(name)


def drop_database(server: PostgresServer, name: str) -> None:
    import psycopg
    from psycopg import sql

    with psycopg.connect(server.dsn(), autocommit=True) as conn:
        drop = sql.SQL("DROP DATABASE IF EXISTS {} WITH (FORCE)")
        conn.execute(drop.format(sql.Identifier(name)))
