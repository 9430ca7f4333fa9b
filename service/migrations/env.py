"""Alembic environment: runs on the connection handed over by service.migrate."""

from __future__ import annotations

from alembic import context

from service import orm  # noqa: F401 - registers the tables on Base.metadata
from service.db import Base

connection = context.config.attributes["connection"]
context.configure(connection=connection, target_metadata=Base.metadata,
                  render_as_batch=connection.dialect.name == "sqlite")
with context.begin_transaction():
    context.run_migrations()
