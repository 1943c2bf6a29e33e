"""One module per revision (Alembic loads them by file; this file is skipped)."""
