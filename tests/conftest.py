"""Shared fixtures: a fresh app per test with a temporary data folder."""
from __future__ import annotations

from pathlib import Path

import pandas as pd
import pytest
from fastapi.testclient import TestClient

import server  # noqa: F401  (sets one BLAS thread before numpy loads)
from server.app import create_app
from server.settings import Settings

LOCAL_BASE = "http://127.0.0.1:8765"  # the Host a browser on this machine sends (settings.port's default)


def local_client(app, **kwargs) -> TestClient:
    """A TestClient naming the server as a page on this machine would (not Starlette's 'testserver')."""
    return TestClient(app, base_url=LOCAL_BASE, **kwargs)


@pytest.fixture
def settings(tmp_path):
    return Settings(data_dir=tmp_path / "data")


@pytest.fixture
def app(settings):
    return create_app(settings)


@pytest.fixture
def client(app):
    with local_client(app) as c:
        yield c


@pytest.fixture(scope="session")
def pg_alpha_data() -> pd.DataFrame:
    """pingouin's ``cronbach_alpha`` data (15 subjects x 10 items), made wide as pingouin.cronbach_alpha does."""
    import pingouin as pg

    d = pg.read_dataset("cronbach_alpha")
    return d.pivot(index="Subj", columns="Items", values="Scores")


@pytest.fixture(scope="session")
def holzinger() -> pd.DataFrame:
    """Holzinger & Swineford (1939): the nine tests x1..x9 of 301 pupils, as semopy ships them."""
    import semopy

    path = Path(semopy.__file__).parent / "examples" / "holzinger_swineford39_data.csv"
    return pd.read_csv(path)[[f"x{i}" for i in range(1, 10)]]
