"""Resampling runs in the database, so every process sharing it reads a run's state and result: one row per
run (its dataset and workspace, state, progress, settings, and the run's JSON with its result), written by the
process that computes it; another process may set the state to ``cancelled``.

Revision ID: 0004
Revises: 0003
"""
from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = "0004"
down_revision = "0003"
branch_labels = None
depends_on = None


def upgrade() -> None:
    op.create_table(
        "runs",
        sa.Column("id", sa.String(64), primary_key=True),
        sa.Column("dataset_id", sa.String(64), nullable=False),
        sa.Column("workspace_id", sa.String(64), nullable=False, server_default="default"),
        sa.Column("state", sa.String(16), nullable=False),
        sa.Column("done", sa.Integer, nullable=False, server_default="0"),
        sa.Column("total", sa.Integer, nullable=False),
        sa.Column("settings", sa.Text, nullable=False),
        sa.Column("record", sa.Text, nullable=False),  # GET /api/runs/{id}'s JSON, result included when done
        sa.Column("updated_at", sa.String(32), nullable=False),
    )


def downgrade() -> None:  # pragma: no cover - Scalewright only upgrades
    raise NotImplementedError("Scalewright's migrations only go forward; restore a backup instead.")
