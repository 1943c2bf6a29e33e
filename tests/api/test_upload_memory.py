"""Uploads go to a temporary file, not to memory, and leave nothing behind (issue 9, item 4).

The multipart parser writes each file part to ``DATA/tmp/``; the response file is read once for parsing and
then moved into the store. Whatever the outcome (stored, refused, cut short, disk full) no temp file stays.
The slow test measures the peak memory (VmHWM) of a real server taking a 50 MB upload.
"""
from __future__ import annotations

import errno
import hashlib
import os
import types
from pathlib import Path

import httpx
import numpy as np
import pytest
from fastapi.testclient import TestClient

import server.api.routes_datasets as routes
from server.app import create_app
from server.settings import Settings
from tests.conftest import local_client
from tests.serverproc import peak_rss_bytes, running_server

ROOT = Path(__file__).resolve().parents[2]
BOUNDARY = "scalewright-test-boundary"


def csv_bytes(rows: int = 200, items: int = 6, seed: int = 3) -> bytes:
    rng = np.random.default_rng(seed)
    lines = ["pid," + ",".join(f"Q{j + 1}" for j in range(items))]
    lines += [f"p{i}," + ",".join(map(str, r)) for i, r in enumerate(rng.integers(1, 6, size=(rows, items)))]
    return ("\n".join(lines) + "\n").encode()


def multipart(raw: bytes, filename: str = "answers.csv", **fields: str) -> bytes:
    parts = [f"--{BOUNDARY}\r\nContent-Disposition: form-data; name=\"{k}\"\r\n\r\n{v}\r\n".encode()
             for k, v in fields.items()]
    parts.append(f"--{BOUNDARY}\r\nContent-Disposition: form-data; name=\"file\"; filename=\"{filename}\"\r\n"
                 "Content-Type: text/csv\r\n\r\n".encode() + raw + b"\r\n")
    return b"".join(parts) + f"--{BOUNDARY}--\r\n".encode()


def chunks(body: bytes, size: int = 64 * 1024):
    for i in range(0, len(body), size):
        yield body[i:i + size]


def post_streamed(client: TestClient, body: bytes) -> httpx.Response:
    """Post without Content-Length (chunked), so only the counting while reading can stop a large body."""
    return client.post("/api/datasets", content=chunks(body),
                       headers={"content-type": f"multipart/form-data; boundary={BOUNDARY}"})


def leftovers(data_dir: Path) -> tuple[list[str], list[str]]:
    """(dataset folders, files in DATA/tmp)."""
    folders = sorted(p.name for p in (data_dir / "datasets").iterdir()) if (data_dir / "datasets").exists() else []
    temps = sorted(p.name for p in (data_dir / "tmp").iterdir()) if (data_dir / "tmp").exists() else []
    return folders, temps


@pytest.fixture
def data_dir(tmp_path):
    return tmp_path / "data"


def make_client(data_dir: Path, **kw) -> TestClient:
    return TestClient(create_app(Settings(data_dir=data_dir, **kw)), base_url="http://127.0.0.1:8765")


def test_a_stored_upload_is_moved_into_place_and_its_temp_file_is_gone(data_dir):
    raw = csv_bytes(rows=3000)  # larger than Starlette's 1 MB memory spool would matter for: ~50 KB is enough
    with make_client(data_dir) as client:
        r = post_streamed(client, multipart(raw, id_column="pid"))
        assert r.status_code == 201, r.text
        body = r.json()
        assert body["sha256"] == hashlib.sha256(raw).hexdigest() and body["size_bytes"] == len(raw)
        assert client.app.state.store.read_raw(body["id"]) == raw  # in the folder's database, byte for byte
        assert leftovers(data_dir) == ([], [])
        assert client.get(f"/api/datasets/{body['id']}").json()["n_rows"] == 3000


@pytest.fixture
def store_client(make_settings, data_dir):
    """``make_client`` on the test's store (the folder's SQLite file or a PostgreSQL database)."""
    def make(**kw) -> TestClient:
        return local_client(create_app(make_settings(data_dir=data_dir, **kw)))
    return make


def test_file_parts_are_written_to_disk_as_they_arrive(store_client, monkeypatch):
    """The parser hands the route a file on disk (DATA/tmp), already complete, not a memory spool."""
    seen = []
    real = routes._file_field

    async def spy(form, name, limit):
        out = await real(form, name, limit)
        if out is not None:
            path, _, size = out
            seen.append((path.parent.name, path.stat().st_size, size))
        return out

    monkeypatch.setattr(routes, "_file_field", spy)
    raw = csv_bytes(rows=40_000)  # ~600 KB
    with store_client() as client:
        r = post_streamed(client, multipart(raw, id_column="pid"))
    assert r.status_code == 201, r.text
    assert seen == [("tmp", len(raw), len(raw))]


@pytest.mark.parametrize("case", ["too_large_counted", "too_large_declared", "bad_file", "cut_short"])
def test_refused_uploads_leave_no_temp_file(data_dir, store_client, case):
    with store_client(max_upload_mb=0.25) as client:
        if case == "too_large_counted":  # no Content-Length: stopped while the file part is being written
            r = post_streamed(client, multipart(csv_bytes(rows=30_000)))
            expected = 413
        elif case == "too_large_declared":
            r = client.post("/api/datasets", files={"file": ("a.csv", csv_bytes(rows=30_000), "text/csv")})
            expected = 413
        elif case == "bad_file":
            r = post_streamed(client, multipart(b"pid,Q1,Q2\np1,1,x\np2,2,3\np3,3,3\n"))
            expected = 422
        else:  # the body ends inside the file part: an unfinished part is no field, so no file was sent
            r = post_streamed(client, multipart(csv_bytes(rows=5000))[:-4000])
            expected = 422
        assert r.status_code == expected, r.text
        assert r.json()["error"]["code"]
        assert leftovers(data_dir) == ([], [])
        assert client.get("/api/datasets").json() == []


class _FullDiskFile:
    """A temp file that takes the first 1,000 bytes of a write, then fails like a full disk."""

    def __init__(self, real):
        self._real = real

    def write(self, data):
        self._real.write(bytes(data[:1000]))
        self._real.flush()
        raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC), self._real.name)

    def __getattr__(self, name):
        return getattr(self._real, name)


def test_disk_full_while_the_upload_is_written_answers_507_and_leaves_nothing(data_dir, store_client, monkeypatch):
    import tempfile

    def named(**kw):
        return _FullDiskFile(tempfile.NamedTemporaryFile(**kw))

    fake = types.SimpleNamespace(NamedTemporaryFile=named)
    with store_client() as client:
        monkeypatch.setattr(routes, "tempfile", fake)
        r = post_streamed(client, multipart(csv_bytes(rows=20_000)))
        assert r.status_code == 507, r.text
        assert r.json()["error"]["code"] == "storage_full"
        assert str(data_dir) not in r.text and ".upload-" not in r.text
        assert leftovers(data_dir) == ([], [])
        monkeypatch.undo()
        assert post_streamed(client, multipart(csv_bytes(), id_column="pid")).status_code == 201


# ---- peak memory of a real server (VmHWM), slow

def _vm_hwm(pid: int) -> int:
    return peak_rss_bytes(pid)


@pytest.mark.slow
@pytest.mark.skipif(not Path("/proc/self/status").exists(), reason="needs /proc (Linux)")
def test_a_50_mb_upload_is_held_in_memory_at_most_once(tmp_path):
    """A 50 MB file the reader refuses at once (binary data): the server's peak grows by about the file, not 2x.

    This isolates the upload path (multipart parsing, spooling, the one copy read for parsing) from the cost
    of parsing a table, which the reader's own benchmark measures (bench/bench_intake.py).
    """
    size = 50 * 1024 * 1024
    path = tmp_path / "binary.csv"
    rng = np.random.default_rng(1)
    with open(path, "wb") as fh:
        fh.write(b"a,b\x00,c\n")
        fh.writelines(rng.integers(32, 127, size=1024 * 1024, dtype=np.uint8).tobytes() for _ in range(50))
    size = path.stat().st_size
    with running_server(tmp_path / "data") as (proc, base):
        baseline = _vm_hwm(proc.pid)
        with open(path, "rb") as fh:
            r = httpx.post(f"{base}/api/datasets", files={"file": ("binary.csv", fh, "text/csv")}, timeout=120)
        assert r.status_code == 422 and r.json()["error"]["code"] == "not_a_table", r.text
        grown = _vm_hwm(proc.pid) - baseline
        assert grown < 1.5 * size + 32 * 1024 * 1024, f"peak grew by {grown / size:.2f} x the file size"
        assert leftovers(tmp_path / "data") == ([], [])
