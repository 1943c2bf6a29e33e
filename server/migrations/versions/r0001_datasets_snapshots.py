"""Datasets (raw bytes in chunks, with their SHA-256) and immutable snapshots.

Revision ID: 0001
Revises:
"""
from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = "0001"
down_revision = None
branch_labels = None
depends_on = None

_SEQ = sa.BigInteger().with_variant(sa.Integer(), "sqlite")  # SQLite: INTEGER PRIMARY KEY (the rowid)


def refuse_changes(table: str, message: str) -> None:
    """Triggers that make ``table`` refuse UPDATE and DELETE (and TRUNCATE on PostgreSQL) with ``message``."""
    if op.get_bind().dialect.name == "postgresql":
        op.execute("CREATE OR REPLACE FUNCTION scalewright_refuse() RETURNS trigger LANGUAGE plpgsql AS "
                   "$$ BEGIN RAISE EXCEPTION '%', TG_ARGV[0] USING ERRCODE = 'restrict_violation'; END $$")
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
        "datasets",
        sa.Column("seq", _SEQ, primary_key=True, autoincrement=True),
        sa.Column("id", sa.String(64), nullable=False, unique=True),
        sa.Column("name", sa.Text, nullable=False),
        sa.Column("filename", sa.Text, nullable=False),
        sa.Column("codebook_filename", sa.Text),
        sa.Column("sha256", sa.String(64), nullable=False),
        sa.Column("codebook_sha256", sa.String(64)),
        sa.Column("size_bytes", sa.BigInteger, nullable=False),
        sa.Column("options", sa.Text, nullable=False),
        sa.Column("meta", sa.Text, nullable=False),
        sa.Column("created_at", sa.String(32), nullable=False),
        sqlite_autoincrement=True,
    )
    op.create_table(  # the uploaded bytes, in parts of at most 1 MB, in order of `part`
        "dataset_files",
        sa.Column("dataset_id", sa.String(64), sa.ForeignKey("datasets.id", ondelete="CASCADE"),
                  primary_key=True),
        sa.Column("kind", sa.String(16), primary_key=True),  # "raw" or "codebook"
        sa.Column("part", sa.Integer, primary_key=True),
        sa.Column("data", sa.LargeBinary, nullable=False),
    )
    op.create_table(
        "snapshots",
        sa.Column("seq", _SEQ, primary_key=True, autoincrement=True),
        sa.Column("id", sa.String(64), nullable=False, unique=True),
        sa.Column("dataset_id", sa.String(64), nullable=False),  # no foreign key: snapshots outlive datasets
        sa.Column("created_at", sa.String(32), nullable=False),
        sa.Column("record", sa.Text, nullable=False),
        sqlite_autoincrement=True,
    )
    op.create_index("snapshots_by_dataset", "snapshots", ["dataset_id", "seq"])
    refuse_changes("snapshots", "snapshots are immutable")


def downgrade() -> None:  # pragma: no cover - Scalewright only upgrades
    raise NotImplementedError("Scalewright's migrations only go forward; restore a backup instead.")
