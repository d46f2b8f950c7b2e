"""Connections to the plant database (psycopg 3, imported only when a connection is made)."""

from __future__ import annotations

from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:
    from psycopg import Connection


class PlantStoreError(RuntimeError):
    """The plant store cannot do what was asked (the message says why and what to do)."""


def connect(dsn: str, connect_timeout_s: int = 10) -> Connection[Any]:
    """A connection in autocommit mode: every writer call then commits its own transaction."""
    import psycopg

    return psycopg.connect(dsn, autocommit=True, connect_timeout=connect_timeout_s)


def require_idle(conn: Connection[Any]) -> None:
    """Our transactions must be real ones, not savepoints inside a caller's open transaction."""
    from psycopg.pq import TransactionStatus

    if conn.info.transaction_status != TransactionStatus.IDLE:
        raise PlantStoreError(
            "the connection has an open transaction; the plant store commits its own "
            "(commit or roll back first, or use heft.daemon.plant.db.connect)"
        )
