"""Alembic environment: runs the revisions on the connection given in ``config.attributes["connection"]``."""
from __future__ import annotations

from alembic import context

connection = context.config.attributes.get("connection")
if connection is None:  # pragma: no cover - only through server.sqlstore.upgrade, which always passes one
    raise RuntimeError("Scalewright's migrations run through `scalewright migrate` (or at server start).")
context.configure(connection=connection, target_metadata=None, transaction_per_migration=False)
with context.begin_transaction():
    context.run_migrations()
