"""Fixtures for the SQL store: ``sql_url`` is a fresh database on each backend (SQLite file, PostgreSQL).

PostgreSQL comes from a throwaway cluster started once per session (``pgcluster.py``; the ``pg_cluster``
fixture of tests/conftest.py, shared with the API suite's PostgreSQL run). Without PostgreSQL's
programs the PostgreSQL cases are skipped, unless SCALEWRIGHT_REQUIRE_POSTGRES=1 (set by .ci/run), which
makes that a failure. SCALEWRIGHT_TEST_PG_URL names an existing server's maintenance database instead.
"""
from __future__ import annotations

import uuid

import pytest


@pytest.fixture(params=["sqlite", "postgresql"])
def sql_url(request, tmp_path) -> str:
    """The URL of an empty database on each backend."""
    if request.param == "sqlite":
        return f"sqlite:///{tmp_path / 'db' / 'scalewright.db'}"
    return request.getfixturevalue("pg_cluster").new_database()


@pytest.fixture
def pg_url(pg_cluster) -> str:
    return pg_cluster.new_database()


@pytest.fixture
def new_name() -> str:
    return uuid.uuid4().hex[:8]
