"""The throw-away PostgreSQL the plant tests run against: it starts, keeps commits, and stops."""

from __future__ import annotations

import os
import pwd

import psycopg

from tests.postgres_server import PostgresServer


def test_server_runs_unprivileged_on_loopback(postgres_server: PostgresServer) -> None:
    with psycopg.connect(postgres_server.dsn()) as conn:
        row = conn.execute(
            "SELECT current_setting('listen_addresses'), current_setting('port')::int, "
            "current_setting('unix_socket_directories'), current_setting('server_version_num')::int"
        ).fetchone()
    assert row is not None
    listen, port, sockets, version = row
    assert listen == "127.0.0.1"
    assert port == postgres_server.port
    assert sockets == str(postgres_server.workdir)  # private socket folder, not the system's
    assert version >= 150000
    owner = pwd.getpwuid(postgres_server.datadir.stat().st_uid).pw_name
    if os.geteuid() == 0:
        assert owner == "postgres"


def test_fresh_database_per_test_is_empty(pg_dsn: str) -> None:
    with psycopg.connect(pg_dsn) as conn:
        row = conn.execute(
            "SELECT count(*) FROM information_schema.tables WHERE table_schema = 'public'"
        ).fetchone()
    assert row == (0,)


def test_committed_rows_survive_a_killed_server() -> None:
    """SIGKILL the server after a commit; the restarted server still has the row (WAL replay)."""
    server = PostgresServer()
    try:
        server.init()
        server.start()
        with psycopg.connect(server.dsn(), autocommit=True) as conn:
            conn.execute("CREATE TABLE t (v int)")
            conn.execute("INSERT INTO t VALUES (42)")
        server.stop(kill=True)
        server.start()
        with psycopg.connect(server.dsn()) as conn:
            assert conn.execute("SELECT v FROM t").fetchall() == [(42,)]
    finally:
        server.remove()
    assert not server.workdir.exists()
