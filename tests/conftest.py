"""Shared fixtures: a fresh app per test with a temporary data folder."""
from __future__ import annotations

import pytest
from fastapi.testclient import TestClient

import server  # noqa: F401  (sets one BLAS thread before numpy loads)
from server.app import create_app
from server.settings import Settings


@pytest.fixture
def settings(tmp_path):
    return Settings(data_dir=tmp_path / "data")


@pytest.fixture
def app(settings):
    return create_app(settings)


@pytest.fixture
def client(app):
    with TestClient(app) as c:
        yield c
