"""Shared fixtures: a fresh app per test with a temporary data folder.

The API tests (tests/api) that take the ``settings`` fixture, or ``make_settings`` for their own limits,
tokens, hosts, demo data or a restart on the same data, run twice: on the data folder's SQLite file and on
the SQL store over a throwaway PostgreSQL cluster (``store_kind`` "postgresql": a fresh database per test,
copied from a migrated template; ``make_settings(fresh=True, data_dir=...)`` takes another for a second
workspace; the data folder is still there for uploads in flight and runs' files). A test about the folder
layout is marked ``folder_only("reason")`` and skipped for the PostgreSQL run; a known SQL-store bug is
marked ``postgresql_xfail("reason")``; slow tests run on the folder store only. Without PostgreSQL's
programs the PostgreSQL run is skipped, unless SCALEWRIGHT_REQUIRE_POSTGRES=1, which makes that a failure.
"""
from __future__ import annotations

import contextlib
import os
import queue
import threading
import uuid
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


API_DIR = Path(__file__).resolve().parent / "api"
STORE_KINDS = ["folder", "postgresql"]


def pytest_generate_tests(metafunc):
    """tests/api tests that take ``settings`` (directly or through ``app``/``client``) or ``make_settings`` (all
    of them depend on ``store_kind``) run on both stores."""
    if "store_kind" in metafunc.fixturenames and API_DIR in Path(str(metafunc.definition.path)).parents:
        metafunc.parametrize("store_kind", STORE_KINDS, indirect=True)


def pytest_collection_modifyitems(config, items):
    """The PostgreSQL run leaves out slow tests (they run on the folder store), skips ``folder_only`` ones and
    expects ``postgresql_xfail`` ones to fail (strict: a fixed bug makes them fail until the marker goes)."""
    kept, dropped = [], []
    for item in items:
        on_pg = getattr(item, "callspec", None) is not None and item.callspec.params.get("store_kind") == "postgresql"
        if on_pg and item.get_closest_marker("slow"):
            dropped.append(item)
            continue
        for name in ("folder_only", "postgresql_xfail"):
            marker = item.get_closest_marker(name) if on_pg else None
            if marker is None:
                continue
            reason = marker.args[0] if marker.args else marker.kwargs.get("reason", "")
            assert reason, f"{item.nodeid}: {name} needs a reason"
            item.add_marker(pytest.mark.skip(reason=f"folder store only: {reason}") if name == "folder_only"
                            else pytest.mark.xfail(reason=reason, strict=True))
        kept.append(item)
    if dropped:
        config.hook.pytest_deselected(items=dropped)
        items[:] = kept


@pytest.fixture(scope="session")
def pg_cluster():
    """A throwaway PostgreSQL cluster for the session (tests/store_sql/pgcluster.py)."""
    from tests.store_sql.pgcluster import PgCluster, pg_bindir

    bindir = pg_bindir()
    if bindir is None:
        message = ("PostgreSQL's server programs (initdb, pg_ctl) are not installed "
                   "(Debian: apt-get install postgresql).")
        if os.environ.get("SCALEWRIGHT_REQUIRE_POSTGRES") == "1":
            pytest.fail(message + " SCALEWRIGHT_REQUIRE_POSTGRES=1, so this is a failure.", pytrace=False)
        pytest.skip(message)
    cluster = PgCluster(bindir).start()
    yield cluster
    cluster.stop()


def _pg_admin(cluster, sql: str) -> None:
    import psycopg

    with psycopg.connect(host=str(cluster.root), user=cluster.role, dbname="postgres", autocommit=True) as con:
        con.execute(sql)


class PgCopies:
    """Fresh databases copied from a migrated template, made (and dropped) by one thread ahead of the tests."""

    AHEAD = 2  # copies kept ready

    def __init__(self, cluster):
        from server.sqlstore import SqlStore

        self.cluster = cluster
        self.template = f"sw_template_{uuid.uuid4().hex[:8]}"
        _pg_admin(cluster, f'CREATE DATABASE "{self.template}"')
        SqlStore(cluster.url(self.template)).close()  # runs the migrations; no connection may stay for copies
        self.ready: queue.Queue = queue.Queue(maxsize=self.AHEAD)
        self.jobs: queue.Queue = queue.Queue()
        self.thread = threading.Thread(target=self._work, daemon=True, name="pg-copies")
        self.thread.start()

    def _work(self) -> None:
        import psycopg

        with psycopg.connect(host=str(self.cluster.root), user=self.cluster.role, dbname="postgres",
                             autocommit=True) as con:
            while True:
                try:
                    job = self.jobs.get(timeout=0.01) if self.ready.full() else self.jobs.get_nowait()
                except queue.Empty:
                    job = None
                if job is None and not self.ready.full():
                    name = f"sw_{uuid.uuid4().hex[:12]}"
                    try:
                        con.execute(f'CREATE DATABASE "{name}" TEMPLATE "{self.template}" STRATEGY FILE_COPY')
                    except psycopg.Error as exc:
                        name = exc
                    self.ready.put(name)
                elif job == "stop":
                    return
                elif job is not None:
                    with contextlib.suppress(psycopg.Error):  # a copy left behind dies with the cluster
                        con.execute(f'DROP DATABASE IF EXISTS "{job}" WITH (FORCE)')

    def take(self) -> str:
        """A fresh database's URL."""
        name = self.ready.get(timeout=120)
        if isinstance(name, Exception):
            raise name
        return self.cluster.url(name)

    def drop(self, url: str) -> None:
        self.jobs.put(url.rsplit("/", 1)[1].split("?", 1)[0])

    def stop(self) -> None:
        self.jobs.put("stop")
        self.thread.join(timeout=60)


@pytest.fixture(scope="session")
def pg_copies(pg_cluster):
    copies = PgCopies(pg_cluster)
    yield copies
    copies.stop()


@pytest.fixture
def store_kind(request) -> str:
    """Which store ``settings`` names: "folder" (the default) or "postgresql" (tests/api, parametrized)."""
    return getattr(request, "param", "folder")


@pytest.fixture
def make_settings(tmp_path, store_kind, request):
    """``make_settings(**overrides) -> Settings`` on the test's store, for a test that sets its own limits.

    The data folder is ``tmp_path / "data"`` unless ``data_dir`` is given. On PostgreSQL every call names the
    same fresh database (a second app on it is a restart: it sees the first one's data; ``settings`` is the
    first call); ``fresh=True`` takes another database for "another workspace" (give it another ``data_dir``
    too, which is what makes it another store on the folder). The databases are dropped after the test.
    """
    copies = request.getfixturevalue("pg_copies") if store_kind == "postgresql" else None
    main: list[str] = []  # the test's database, taken at the first call that needs it
    fresh_ones: list[str] = []

    def make(*, fresh: bool = False, **overrides) -> Settings:
        assert not fresh or "data_dir" in overrides, "fresh=True: give another data_dir as well"
        overrides.setdefault("data_dir", tmp_path / "data")
        if copies is not None and "database_url" not in overrides:
            if fresh:
                fresh_ones.append(copies.take())
            elif not main:
                main.append(copies.take())
            overrides["database_url"] = fresh_ones[-1] if fresh else main[0]
        return Settings(**overrides)

    yield make
    for url in main + fresh_ones:
        copies.drop(url)


@pytest.fixture
def settings(make_settings):
    return make_settings()


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
