"""Workspaces, people (salted scrypt hashes of their access tokens) and memberships with a role; datasets,
snapshots and audit entries belong to a workspace (rows written before go to the workspace ``default``).

Revision ID: 0003
Revises: 0002
"""
from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = "0003"
down_revision = "0002"
branch_labels = None
depends_on = None

DEFAULT_WORKSPACE = "default"  # id and name of the workspace that receives the rows of earlier revisions


def upgrade() -> None:
    op.create_table(
        "workspaces",
        sa.Column("id", sa.String(64), primary_key=True),
        sa.Column("name", sa.Text, nullable=False, unique=True),
        sa.Column("created_at", sa.String(32), nullable=False),
    )
    op.create_table(  # the token itself is never stored: its public key part and a salted scrypt hash
        "people",
        sa.Column("id", sa.String(64), primary_key=True),
        sa.Column("name", sa.Text, nullable=False),
        sa.Column("token_key", sa.String(32), nullable=False, unique=True),
        sa.Column("token_salt", sa.LargeBinary, nullable=False),
        sa.Column("token_hash", sa.LargeBinary, nullable=False),
        sa.Column("created_at", sa.String(32), nullable=False),
    )
    op.create_table(
        "memberships",
        sa.Column("person_id", sa.String(64), sa.ForeignKey("people.id", ondelete="CASCADE"), primary_key=True),
        sa.Column("workspace_id", sa.String(64), sa.ForeignKey("workspaces.id"), nullable=False),
        sa.Column("role", sa.String(16), nullable=False),
        sa.CheckConstraint("role IN ('owner', 'analyst', 'viewer')", name="memberships_role"),
    )
    op.execute(sa.text("INSERT INTO workspaces (id, name, created_at) VALUES (:id, :id, :at)").bindparams(
        id=DEFAULT_WORKSPACE, at="1970-01-01T00:00:00.000000Z"))
    # a column with a constant default: existing rows get it without an UPDATE (the snapshot and audit
    # triggers refuse updates, and this is DDL, not one)
    for table in ("datasets", "snapshots", "audit"):
        op.add_column(table, sa.Column("workspace_id", sa.String(64), nullable=False,
                                       server_default=DEFAULT_WORKSPACE))
    op.create_index("datasets_by_workspace", "datasets", ["workspace_id", "seq"])
    op.create_index("audit_by_workspace", "audit", ["workspace_id", "seq"])


def downgrade() -> None:  # pragma: no cover - Scalewright only upgrades
    raise NotImplementedError("Scalewright's migrations only go forward; restore a backup instead.")
