"""GET /api/audit, GET /api/workspace/backup and POST /api/workspace/restore."""
from __future__ import annotations

import hashlib
import io
import json
import sqlite3
import zipfile

import pytest

from server.app import create_app
from server.store import DB_NAME
from tests.conftest import local_client

CSV = b"id,Q1,Q2,Q3,Q4\n" + b"".join(
    f"r{i},{a},{b},{c},{d}\n".encode() for i, (a, b, c, d) in enumerate(
        [(5, 4, 4, 3), (3, 1, 2, 3), (5, 3, 4, 5), (5, 4, 5, 5), (3, 2, 3, 2), (1, 1, 1, 1), (3, 3, 1, 3),
         (5, 3, 4, 3), (3, 2, 1, 2), (2, 2, 2, 1), (3, 1, 2, 1), (4, 3, 3, 3)]))
SNAPSHOT = {"name": "Short form", "author": "Bo", "items": ["Q1", "Q2", "Q3"],
            "removed": [{"item": "Q4", "reason": "weak", "code": "weak"}]}


def _upload(client, **data):
    r = client.post("/api/datasets", files={"file": ("pilot.csv", CSV, "text/csv")}, data=data)
    assert r.status_code == 201, r.text
    return r.json()


def test_upload_snapshot_and_deletion_are_listed_in_order(client):
    ds = _upload(client, who="Ana")
    snap = client.post(f"/api/datasets/{ds['id']}/snapshots", json=SNAPSHOT).json()
    assert client.delete(f"/api/datasets/{ds['id']}", headers={"X-Scalewright-Who": "Cy"}).status_code == 204

    log = client.get("/api/audit").json()  # newest first
    assert [e["action"] for e in log] == ["delete", "snapshot", "upload"]
    assert [e["seq"] for e in log] == sorted((e["seq"] for e in log), reverse=True)
    assert [e["at"] for e in log] == sorted((e["at"] for e in log), reverse=True)
    delete, saved, upload = log
    assert (upload["who"], upload["dataset_id"]) == ("Ana", ds["id"])
    assert upload["details"]["sha256"] == hashlib.sha256(CSV).hexdigest() == ds["sha256"]
    assert upload["details"]["filename"] == "pilot.csv" and upload["details"]["n_items"] == 4
    assert (saved["who"], saved["snapshot_id"], saved["dataset_id"]) == ("Bo", snap["id"], ds["id"])
    assert saved["details"]["dataset_sha256"] == ds["sha256"] and saved["details"]["removed"] == ["Q4"]
    assert (delete["who"], delete["dataset_id"], delete["details"]["sha256"]) == ("Cy", ds["id"], ds["sha256"])

    # the log outlives the dataset it mentions, and can be filtered and limited
    assert client.get(f"/api/datasets/{ds['id']}").status_code == 404
    assert [e["action"] for e in client.get(f"/api/audit?dataset_id={ds['id']}").json()] == \
        ["delete", "snapshot", "upload"]
    assert client.get("/api/audit?dataset_id=nope").json() == []
    assert [e["action"] for e in client.get("/api/audit?limit=1").json()] == ["delete"]


def test_who_header_is_percent_encoded_utf8_and_restore_is_audited(client):
    ds = _upload(client, name="pilot")
    snap = client.post(f"/api/datasets/{ds['id']}/snapshots", json={**SNAPSHOT, "author": ""},
                       headers={"X-Scalewright-Who": "Zo%C3%AB"}).json()
    assert client.get(f"/api/snapshots/{snap['id']}/restore", headers={"X-Scalewright-Who": "%C5%81ukasz"}
                      ).status_code == 200
    log = client.get("/api/audit").json()
    assert [(e["action"], e["who"]) for e in log] == [("snapshot_restore", "Łukasz"), ("snapshot", "Zoë"),
                                                      ("upload", None)]
    assert log[0]["snapshot_id"] == snap["id"]


@pytest.mark.parametrize("query", ["limit=0", "limit=abc", "limit=100000"])
def test_bad_audit_queries_get_the_error_shape(client, query):
    r = client.get(f"/api/audit?{query}")
    assert r.status_code == 422 and r.json()["error"]["code"]


def _backup(client) -> bytes:
    r = client.get("/api/workspace/backup", headers={"X-Scalewright-Who": "Ana"})
    assert r.status_code == 200 and r.headers["content-type"] == "application/zip"
    assert r.headers["content-disposition"].startswith("attachment; filename=\"scalewright-backup-")
    assert r.headers["x-backup-sha256"] == hashlib.sha256(r.content).hexdigest()
    return r.content


def _import(client, blob: bytes, **kw):
    return client.post("/api/workspace/restore", files={"file": ("ws.zip", blob, "application/zip")}, **kw)


def test_workspace_backup_and_import(client):
    ds = _upload(client)
    snap = client.post(f"/api/datasets/{ds['id']}/snapshots", json=SNAPSHOT).json()
    blob = _backup(client)
    with zipfile.ZipFile(io.BytesIO(blob)) as zf:
        manifest = json.loads(zf.read("manifest.json"))
        assert zf.read(f"datasets/{ds['id']}/raw") == CSV
    # a SQL store's backup also carries its workspaces and people (team.json), a folder's does not
    assert {f["path"] for f in manifest["files"]} - {"team.json"} == {DB_NAME, f"datasets/{ds['id']}/raw"}
    entry = client.get("/api/audit?limit=1").json()[0]
    assert (entry["action"], entry["who"]) == ("backup", "Ana")
    assert entry["details"]["zip_sha256"] == hashlib.sha256(blob).hexdigest()

    # importing into the same workspace skips what is there
    r = _import(client, blob)
    assert r.status_code == 200
    assert r.json() == {"mode": "merge", "datasets_added": [], "datasets_skipped": [ds["id"]],
                        "snapshots_added": [], "snapshots_skipped": [snap["id"]]}

    # after a deletion the import brings the dataset back, analysable, and says who did it
    assert client.delete(f"/api/datasets/{ds['id']}").status_code == 204
    r = _import(client, blob, data={"who": "Dee"})
    assert r.status_code == 200 and r.json()["datasets_added"] == [ds["id"]]
    assert client.get(f"/api/datasets/{ds['id']}").json()["sha256"] == ds["sha256"]
    assert client.post(f"/api/datasets/{ds['id']}/analysis", json={}).status_code == 200
    assert client.get(f"/api/snapshots/{snap['id']}/responses").status_code == 200
    entry = client.get("/api/audit?limit=1").json()[0]
    assert (entry["action"], entry["who"], entry["details"]["datasets_added"]) == ("restore", "Dee", [ds["id"]])


def test_import_into_a_second_workspace(tmp_path, client, make_settings):
    ds = _upload(client)
    client.post(f"/api/datasets/{ds['id']}/snapshots", json=SNAPSHOT)
    blob = _backup(client)
    with local_client(create_app(make_settings(fresh=True, data_dir=tmp_path / "other"))) as other:
        mine = _upload(other)  # the same file uploaded there is another dataset (another id)
        r = _import(other, blob)
        assert r.status_code == 200 and r.json()["datasets_added"] == [ds["id"]]
        assert {d["id"] for d in other.get("/api/datasets").json()} == {ds["id"], mine["id"]}
        assert len(other.get(f"/api/datasets/{ds['id']}/snapshots").json()) == 1


def _altered(blob: bytes, which) -> bytes:
    out = io.BytesIO()
    with zipfile.ZipFile(io.BytesIO(blob)) as src, zipfile.ZipFile(out, "w") as dst:
        for info in src.infolist():
            data = src.read(info)
            if which(info.filename):
                data = data[:10] + bytes([data[10] ^ 1]) + data[11:]
            dst.writestr(info.filename, data)
    return out.getvalue()


@pytest.mark.parametrize("member", ["raw", "db"])
def test_import_with_an_altered_byte_is_422_and_adds_nothing(client, member):
    ds = _upload(client)
    blob = _backup(client)
    client.delete(f"/api/datasets/{ds['id']}")
    before = client.get("/api/audit").json()
    bad = _altered(blob, (lambda n: n.endswith("/raw")) if member == "raw" else (lambda n: n == DB_NAME))
    r = _import(client, bad)
    assert r.status_code == 422
    err = r.json()["error"]
    assert err["code"] == "bad_backup" and "SHA-256" in err["message"] and "ws.zip" in err["message"]
    assert "/tmp" not in err["message"]
    assert client.get("/api/datasets").json() == [] and client.get("/api/audit").json() == before


def test_import_conflict_is_409(client, tmp_path):
    ds = _upload(client)
    blob = _backup(client)
    # the same dataset id with another file: a different workspace's dataset under this one's id
    out = io.BytesIO()
    other = CSV.replace(b"r0,5,4,4,3", b"r0,4,4,4,3")
    with zipfile.ZipFile(io.BytesIO(blob)) as src, zipfile.ZipFile(out, "w") as dst:
        manifest = json.loads(src.read("manifest.json"))
        db = src.read(DB_NAME)
        path = tmp_path / "x.sqlite3"
        path.write_bytes(db)
        con = sqlite3.connect(path)
        con.execute("UPDATE datasets SET sha256 = ?", (hashlib.sha256(other).hexdigest(),))
        con.commit()
        con.close()
        members = {DB_NAME: path.read_bytes(), f"datasets/{ds['id']}/raw": other}
        manifest["files"] = [{"path": n, "size": len(d), "sha256": hashlib.sha256(d).hexdigest()}
                             for n, d in members.items()]
        for n, d in members.items():
            dst.writestr(n, d)
        dst.writestr("manifest.json", json.dumps(manifest))
    r = _import(client, out.getvalue())
    assert r.status_code == 409
    assert r.json()["error"]["code"] == "restore_conflict" and r.json()["error"]["details"]["conflicts"] == [
        {"dataset": ds["id"]}]
    assert client.get(f"/api/datasets/{ds['id']}").json()["sha256"] == ds["sha256"]


def test_import_refusals(make_settings):
    app = create_app(make_settings(max_import_mb=0.01))
    with local_client(app) as c:
        assert c.post("/api/workspace/restore", content=b"x", headers={"content-type": "application/zip"}
                      ).status_code == 415
        r = c.post("/api/workspace/restore", data={"who": "x"}, files={"other": ("a", b"1")})
        assert r.status_code == 422 and r.json()["error"]["code"] == "missing_file"
        r = _import(c, b"not a zip")
        assert r.status_code == 422 and "not a readable zip" in r.json()["error"]["message"]
        r = _import(c, b"0" * 20_000)
        assert r.status_code == 413 and r.json()["error"]["code"] == "too_large"


def test_loading_the_demo_is_logged_as_uploads_by_the_demo(make_settings):
    with local_client(create_app(make_settings(demo=True))) as client:
        log = client.get("/api/audit").json()
        assert [e["action"] for e in log] == ["upload", "upload"]
        assert {e["who"] for e in log} == {"demo"}
        stored = {d["id"]: d["sha256"] for d in client.get("/api/datasets").json()}
        assert {e["dataset_id"]: e["details"]["sha256"] for e in log} == stored
        client.post("/api/demo")  # already there: nothing added, nothing logged
        assert len(client.get("/api/audit").json()) == 2
