"""Shared fixtures: a real Mosquitto broker, and a real PostgreSQL, per test that wants one."""

from __future__ import annotations

import uuid
from collections.abc import Iterator
from pathlib import Path
from typing import TYPE_CHECKING, Any

import pytest

from tests.mqtt_broker import Broker, free_port
from tests.postgres_server import PostgresServer, create_database, drop_database

if TYPE_CHECKING:
    from psycopg import Connection


@pytest.fixture
def broker(tmp_path: Path) -> Iterator[Broker]:
    """A fresh broker on a free loopback port; stopped after the test."""
    b = Broker(workdir=tmp_path, port=free_port())
    b.start()
    try:
        yield b
    finally:
        b.stop()


@pytest.fixture(scope="session")
def postgres_server() -> Iterator[PostgresServer]:
    """One throw-away PostgreSQL cluster for the whole run (initdb costs seconds)."""
    server = PostgresServer()
    try:
        server.init()
        server.start()
        yield server
    finally:
        server.remove()


@pytest.fixture
def pg_dsn(postgres_server: PostgresServer) -> Iterator[str]:
    """A fresh, empty database per test; dropped afterwards."""
    name = f"t_{uuid.uuid4().hex[:16]}"
    dsn = create_database(postgres_server, name)
    try:
        yield dsn
    finally:
        drop_database(postgres_server, name)


@pytest.fixture
def plant_conn(pg_dsn: str) -> Iterator[Connection[Any]]:
    """A connection to a fresh database laid out with the plant schema (all migrations)."""
    from heft.daemon.plant.db import connect
    from heft.daemon.plant.migrations import migrate

    with connect(pg_dsn) as conn:
        migrate(conn)
        yield conn
