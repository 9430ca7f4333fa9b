"""Database engine and sessions (SQLAlchemy 2.x).

SQLite (the default, ``sqlite:///./fanfold.db``) gets WAL journaling and durable commits:
``journal_mode=WAL``, ``synchronous=FULL``, ``busy_timeout=5000``, ``foreign_keys=ON``
(sqlite.org/wal.html, sqlite.org/pragma.html). PostgreSQL connections are pre-pinged.
"""

from __future__ import annotations

import logging
from typing import Any

from sqlalchemy import Engine, create_engine, event
from sqlalchemy.orm import DeclarativeBase, Session, sessionmaker
from sqlalchemy.pool import StaticPool

__all__ = ["Base", "make_engine", "make_session_factory"]

log = logging.getLogger("fanfold.service")


class Base(DeclarativeBase):
    """Declarative base of the service's tables."""


def _sqlite_pragmas(dbapi_conn: Any, _record: Any) -> None:
    cur = dbapi_conn.cursor()
    cur.execute("PRAGMA journal_mode=WAL")
    mode = cur.fetchone()[0]
    if mode.lower() not in ("wal", "memory"):
        log.warning("SQLite refused WAL journaling (journal_mode=%s); concurrent readers "
                    "will wait for writers", mode)
    cur.execute("PRAGMA synchronous=FULL")
    cur.execute("PRAGMA busy_timeout=5000")
    cur.execute("PRAGMA foreign_keys=ON")
    cur.close()


def make_engine(url: str) -> Engine:
    """An engine for ``url`` with the durability settings above."""
    if url.startswith("sqlite"):
        memory = url in ("sqlite://", "sqlite:///:memory:")
        engine = create_engine(
            url, connect_args={"check_same_thread": False},
            poolclass=StaticPool if memory else None,
        )
        event.listen(engine, "connect", _sqlite_pragmas)
        return engine
    return create_engine(url, pool_pre_ping=True)


def make_session_factory(engine: Engine) -> sessionmaker[Session]:
    return sessionmaker(engine, expire_on_commit=False)
