"""Schema migrations (Alembic), run programmatically at start-up."""

from __future__ import annotations

from pathlib import Path

from alembic import command
from alembic.config import Config
from alembic.runtime.migration import MigrationContext
from alembic.script import ScriptDirectory
from sqlalchemy import Engine

__all__ = ["at_head", "upgrade"]

_SCRIPTS = str(Path(__file__).resolve().parent / "migrations")


def _config() -> Config:
    cfg = Config()
    cfg.set_main_option("script_location", _SCRIPTS)
    return cfg


def upgrade(engine: Engine) -> None:
    """Bring the database schema to the newest revision."""
    cfg = _config()
    with engine.begin() as conn:
        cfg.attributes["connection"] = conn
        command.upgrade(cfg, "head")


def at_head(engine: Engine) -> bool:
    """Whether the database schema is at the newest revision (for /readyz)."""
    head = ScriptDirectory.from_config(_config()).get_current_head()
    with engine.connect() as conn:
        return MigrationContext.configure(conn).get_current_revision() == head
