"""Faults answer with a plain message: no path, traceback or exception text in the body; the log has them."""
from __future__ import annotations

import errno
import logging
import sqlite3

import pytest

from server.app import create_app
from server.store import StorageError
from tests.conftest import local_client

SECRET = "/home/ana/private/scalewright-data/raw/3f2a.csv"


@pytest.fixture
def faulty(settings):
    app = create_app(settings)
    with local_client(app, raise_server_exceptions=False) as c:
        yield app, c


def _break_listing(monkeypatch, app, exc: BaseException):
    def broken(*args, **kwargs):
        raise exc

    monkeypatch.setattr(app.state.store, "list_datasets", broken)


def test_a_500_names_no_path_and_logs_the_traceback_under_an_incident_id(faulty, monkeypatch, caplog):
    app, client = faulty
    _break_listing(monkeypatch, app, RuntimeError(f"could not parse {SECRET}: KeyError 'Q7'"))
    with caplog.at_level(logging.ERROR, logger="scalewright"):
        r = client.get("/api/datasets")
    assert r.status_code == 500
    error = r.json()["error"]
    assert error["code"] == "internal"
    assert error["message"] == "Something went wrong on the server; the details are in its log."
    incident = error["details"]["incident"]
    assert 6 <= len(incident) <= 16 and incident.isalnum()
    for leak in (SECRET, "RuntimeError", "Traceback", "KeyError", "private"):
        assert leak not in r.text
    logged = [rec for rec in caplog.records if incident in rec.getMessage()]
    assert logged and logged[0].exc_info and SECRET in str(logged[0].exc_info[1])


def test_incident_ids_differ(faulty, monkeypatch):
    app, client = faulty
    _break_listing(monkeypatch, app, ValueError(SECRET))
    first, second = (client.get("/api/datasets").json()["error"]["details"]["incident"] for _ in range(2))
    assert first != second


@pytest.mark.parametrize(("exc", "status", "code", "words"), [
    (OSError(errno.ENOSPC, "No space left on device", SECRET), 507, "storage_full", "full"),
    (OSError(errno.EDQUOT, "Disk quota exceeded", SECRET), 507, "storage_full", "full"),
    (PermissionError(errno.EACCES, "Permission denied", SECRET), 503, "storage_unavailable", "cannot be written"),
    (OSError(errno.EPERM, "Operation not permitted", SECRET), 503, "storage_unavailable", "cannot be written"),
    (OSError(errno.EROFS, "Read-only file system", SECRET), 503, "storage_unavailable", "cannot be written"),
    (sqlite3.OperationalError("database or disk is full"), 507, "storage_full", "full"),
    (sqlite3.OperationalError("attempt to write a readonly database"), 503, "storage_unavailable",
     "cannot be written"),
])
def test_storage_faults_get_507_or_503_without_a_path(faulty, monkeypatch, exc, status, code, words):
    app, client = faulty
    _break_listing(monkeypatch, app, exc)
    r = client.get("/api/datasets")
    assert r.status_code == status
    error = r.json()["error"]
    assert error["code"] == code
    assert words in error["message"]
    assert SECRET not in r.text and "/" not in error["message"] and "Errno" not in r.text


def test_other_os_errors_are_plain_500s(faulty, monkeypatch):
    app, client = faulty
    _break_listing(monkeypatch, app, FileNotFoundError(errno.ENOENT, "No such file or directory", SECRET))
    r = client.get("/api/datasets")
    assert r.status_code == 500
    assert r.json()["error"]["code"] == "internal"
    assert SECRET not in r.text


def test_a_storage_error_keeps_its_own_answer(faulty, monkeypatch):
    app, client = faulty
    _break_listing(monkeypatch, app, StorageError(507, "storage_full", "The disk is full."))
    r = client.get("/api/datasets")
    assert (r.status_code, r.json()["error"]["code"], r.json()["error"]["message"]) == (
        507, "storage_full", "The disk is full.")


def test_a_failed_upload_write_answers_507(faulty, monkeypatch):
    app, client = faulty

    def full(*args, **kwargs):
        raise OSError(errno.ENOSPC, "No space left on device", SECRET)

    monkeypatch.setattr(app.state.store, "add_dataset", full)
    r = client.post("/api/datasets", files={"file": ("r.csv", b"Q1,Q2\n1,2\n2,1\n3,3\n", "text/csv")})
    assert r.status_code == 507, r.text
    assert SECRET not in r.text
