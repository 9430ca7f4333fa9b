"""Schema migrations (Alembic), run programmatically at start-up.

Every uvicorn worker and every replica runs :func:`upgrade` when it starts, often at the
same moment on a fresh database; without a lock two of them both create the tables and
all but one crash ("table alembic_version already exists"). So the migration runs under
a database-wide lock that the others wait for, then find the schema at head: a
transaction-level advisory lock on PostgreSQL, the write lock (``BEGIN IMMEDIATE``,
retried for up to ``MIGRATION_WAIT_S``) on SQLite.
"""

from __future__ import annotations

import time
from pathlib import Path

from alembic import command
from alembic.config import Config
from alembic.runtime.migration import MigrationContext
from alembic.script import ScriptDirectory
from sqlalchemy import Connection, Engine, text
from sqlalchemy.exc import OperationalError

__all__ = ["at_head", "upgrade"]

_SCRIPTS = str(Path(__file__).resolve().parent / "migrations")
#: the advisory-lock key of schema migrations on PostgreSQL (any constant bigint)
MIGRATION_LOCK_KEY = 0x66616E666F6C64  # "fanfold"
MIGRATION_WAIT_S = 120.0  # how long a starting process waits for another's migration


def _config() -> Config:
    cfg = Config()
    cfg.set_main_option("script_location", _SCRIPTS)
    return cfg


def upgrade(engine: Engine) -> None:
    """Bring the database schema to the newest revision."""
    cfg = _config()
    with engine.begin() as conn:
        _lock_schema(conn)
        cfg.attributes["connection"] = conn
        command.upgrade(cfg, "head")


def _lock_schema(conn: Connection) -> None:
    """Hold the database's migration lock until this transaction ends."""
    if conn.dialect.name == "postgresql":
        conn.execute(text("SELECT pg_advisory_xact_lock(:key)"), {"key": MIGRATION_LOCK_KEY})
    elif conn.dialect.name == "sqlite":
        # each attempt waits up to the connection's busy_timeout (5 s); a migration on a
        # loaded machine can hold the lock longer, and the waiting worker crashed
        deadline = time.monotonic() + MIGRATION_WAIT_S
        while True:
            try:
                conn.exec_driver_sql("BEGIN IMMEDIATE")
                return
            except OperationalError as exc:
                if "locked" not in str(exc) or time.monotonic() > deadline:
                    raise


def at_head(engine: Engine) -> bool:
    """Whether the database schema is at the newest revision (for /readyz)."""
    head = ScriptDirectory.from_config(_config()).get_current_head()
    with engine.connect() as conn:
        return MigrationContext.configure(conn).get_current_revision() == head
