"""Alembic migrations of :class:`server.sqlstore.SqlStore` (SQLite and PostgreSQL), run programmatically.

``env.py`` takes the connection :func:`server.sqlstore.upgrade` hands it in ``config.attributes``; no
``alembic.ini`` is read. ``versions/`` holds one file per revision, in order; add a revision, never edit one
that has shipped.
"""
