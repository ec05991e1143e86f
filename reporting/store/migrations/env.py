"""Alembic environment: migrations run on the connection :mod:`reporting.store.migrate` passes in."""

from __future__ import annotations

from alembic import context

from reporting.store.schema import Base

connection = context.config.attributes["connection"]
context.configure(connection=connection, target_metadata=Base.metadata, render_as_batch=True)
with context.begin_transaction():
    context.run_migrations()
