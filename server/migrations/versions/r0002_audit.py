"""The append-only audit log.

Revision ID: 0002
Revises: 0001
"""
from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = "0002"
down_revision = "0001"
branch_labels = None
depends_on = None


def _refuse_changes(table: str, message: str) -> None:
    """Triggers refusing UPDATE and DELETE (and TRUNCATE on PostgreSQL); the function is from revision 0001."""
    if op.get_bind().dialect.name == "postgresql":
        op.execute(f"CREATE TRIGGER {table}_no_change BEFORE UPDATE OR DELETE ON {table} "
                   f"FOR EACH ROW EXECUTE FUNCTION scalewright_refuse('{message}')")
        op.execute(f"CREATE TRIGGER {table}_no_truncate BEFORE TRUNCATE ON {table} "
                   f"FOR EACH STATEMENT EXECUTE FUNCTION scalewright_refuse('{message}')")
    else:
        for event in ("UPDATE", "DELETE"):
            op.execute(f"CREATE TRIGGER {table}_no_{event.lower()} BEFORE {event} ON {table} "
                       f"BEGIN SELECT RAISE(ABORT, '{message}'); END")


def upgrade() -> None:
    op.create_table(
        "audit",
        sa.Column("seq", sa.BigInteger().with_variant(sa.Integer(), "sqlite"), primary_key=True, autoincrement=True),
        sa.Column("at", sa.String(32), nullable=False),
        sa.Column("who", sa.Text),
        sa.Column("action", sa.Text, nullable=False),
        sa.Column("dataset_id", sa.String(64)),
        sa.Column("snapshot_id", sa.String(64)),
        sa.Column("details", sa.Text, nullable=False, server_default="{}"),
        sqlite_autoincrement=True,
    )
    op.create_index("audit_by_dataset", "audit", ["dataset_id", "seq"])
    _refuse_changes("audit", "the audit log is append-only")


def downgrade() -> None:  # pragma: no cover - Scalewright only upgrades
    raise NotImplementedError("Scalewright's migrations only go forward; restore a backup instead.")
