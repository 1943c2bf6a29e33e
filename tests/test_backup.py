"""server/backup.py and the `scalewright backup` / `scalewright restore` commands."""
from __future__ import annotations

import hashlib
import json
import os
import shutil
import sqlite3
import subprocess
import sys
import threading
import zipfile
from pathlib import Path

import pytest

import server
from server.backup import BackupError, RestoreConflict
from server.folder_store import DB_FILE, backup_folder, restore_folder
from server.store import DB_NAME, SCHEMA_VERSION, Store

ROOT = Path(__file__).resolve().parent.parent
V1 = Path(__file__).parent / "reference" / "store" / "v1_data"
CSV = b"id,A1,A2,A3\nr1,1,2,3\nr2,2,2,4\nr3,3,4,4\nr4,5,4,5\n"


def _sha(data: bytes) -> str:
    return hashlib.sha256(data).hexdigest()


def _make_folder(folder: Path, n: int = 2) -> Store:
    store = Store(folder)
    for i in range(n):
        rec = store.add_dataset(name=f"set {i}", raw=CSV + f"r9,{i},1,1\n".encode(), filename=f"s{i}.csv",
                                codebook_raw=b"item,text\nA1,first\n" if i == 0 else None,
                                codebook_filename="cb.csv" if i == 0 else None, options={}, meta={"n_rows": 5})
        store.add_snapshot(rec["id"], {"name": f"snap {i}", "items": ["A1", "A2"], "value": 0.1 + i})
        store.audit("upload", who="Ana", dataset_id=rec["id"], details={"sha256": rec["sha256"]})
    return store


def _records(folder: Path) -> dict[str, str]:
    """Snapshot id -> SHA-256 of its stored record JSON, straight from SQLite."""
    con = sqlite3.connect(folder / (DB_FILE if (folder / DB_FILE).is_file() else DB_NAME))  # or an earlier store
    try:
        return {i: _sha(r.encode()) for i, r in con.execute("SELECT id, record FROM snapshots")}
    finally:
        con.close()


def _raw_files(folder: Path) -> dict[str, str]:
    """"<dataset id>/raw" or "/codebook" -> SHA-256 of the upload kept in the folder's database."""
    con = sqlite3.connect(folder / DB_FILE)
    try:
        parts: dict[str, bytes] = {}
        for dataset_id, kind, data in con.execute(
                "SELECT dataset_id, kind, data FROM dataset_files ORDER BY dataset_id, kind, part"):
            parts[f"{dataset_id}/{kind}"] = parts.get(f"{dataset_id}/{kind}", b"") + bytes(data)
        return {name: _sha(data) for name, data in sorted(parts.items())}
    finally:
        con.close()


def _rewrite(zip_in: Path, zip_out: Path, change) -> None:
    """Copy a zip, passing each (name, bytes) through ``change`` (return None to drop a member)."""
    with zipfile.ZipFile(zip_in) as src, zipfile.ZipFile(zip_out, "w", zipfile.ZIP_DEFLATED) as dst:
        for info in src.infolist():
            data = change(info.filename, src.read(info))
            if data is not None:
                dst.writestr(info.filename, data)


def _flip(data: bytes, at: int | None = None) -> bytes:
    at = len(data) // 2 if at is None else at
    return data[:at] + bytes([data[at] ^ 0x01]) + data[at + 1:]


# ---------------------------------------------------------------- backup

def test_backup_writes_manifest_with_hashes(tmp_path):
    _make_folder(tmp_path / "src")
    out = backup_folder(tmp_path / "src", tmp_path / "b.zip", who="Ana")
    assert (out["datasets"], out["snapshots"]) == (2, 2)
    with zipfile.ZipFile(tmp_path / "b.zip") as zf:
        manifest = json.loads(zf.read("manifest.json"))
        names = set(zf.namelist())
        for f in manifest["files"]:
            data = zf.read(f["path"])
            assert (len(data), _sha(data)) == (f["size"], f["sha256"])
    assert names == {f["path"] for f in manifest["files"]} | {"manifest.json"}
    assert DB_NAME in names and sum(n.endswith("/raw") for n in names) == 2 and sum(n.endswith("/codebook")
                                                                                    for n in names) == 1
    assert manifest["software_version"] == server.__version__
    assert manifest["schema_version"] == SCHEMA_VERSION and manifest["created_at"].endswith("Z")
    assert not any(n.endswith(("-wal", "-shm", ".lock")) for n in names)
    (entry,) = [e for e in Store(tmp_path / "src").list_audit() if e["action"] == "backup"]
    assert entry["who"] == "Ana" and entry["details"]["zip_sha256"] == _sha((tmp_path / "b.zip").read_bytes())


def test_backup_of_a_folder_without_database_is_refused(tmp_path):
    (tmp_path / "empty").mkdir()
    with pytest.raises(BackupError, match="holds no Scalewright database"):
        backup_folder(tmp_path / "empty", tmp_path / "b.zip")
    assert not (tmp_path / "b.zip").exists()


def test_backup_while_snapshots_are_saved_is_consistent(tmp_path):
    src = tmp_path / "src"
    store = _make_folder(src, n=1)
    dataset_id = store.list_datasets()[0]["id"]
    per_thread, n_threads = 25, 3
    errors = []

    def writer(t: int):
        try:
            for k in range(per_thread):
                store.add_snapshot(dataset_id, {"name": f"t{t}-{k}", "thread": t, "k": k, "items": ["A1", "A2"]})
        except Exception as exc:  # noqa: BLE001  (surfaced by the assertion below)
            errors.append(exc)

    threads = [threading.Thread(target=writer, args=(t,)) for t in range(n_threads)]
    for t in threads:
        t.start()
    zips = []
    while any(t.is_alive() for t in threads) or not zips:  # at least one backup starts while writers run
        zips.append(tmp_path / f"b{len(zips)}.zip")
        backup_folder(src, zips[-1])
    for t in threads:
        t.join()
    assert not errors
    zips.append(tmp_path / "final.zip")
    backup_folder(src, zips[-1])
    source_records = _records(src)
    assert len(source_records) == 1 + per_thread * n_threads
    for i, z in enumerate(zips):
        target = tmp_path / f"restored{i}"
        restore_folder(target, z)
        restored = _records(target)
        # every snapshot in the backup is byte-identical to the source's, and each thread's saves form a
        # prefix (a snapshot saved after one that is missing is never in the copy): one consistent moment
        assert all(source_records[k] == v for k, v in restored.items())
        con = sqlite3.connect(target / DB_FILE)
        got = [json.loads(r) for (r,) in con.execute("SELECT record FROM snapshots")]
        con.close()
        for t in range(n_threads):
            ks = sorted(s["k"] for s in got if s.get("thread") == t)
            assert ks == list(range(len(ks)))
        assert _raw_files(target) == _raw_files(src)
    assert _records(tmp_path / f"restored{len(zips) - 1}") == source_records


# ---------------------------------------------------------------- restore

def test_restore_into_empty_folder_is_byte_identical(tmp_path):
    src = tmp_path / "src"
    _make_folder(src)
    backup_folder(src, tmp_path / "b.zip")
    (tmp_path / "empty").mkdir()
    for target in (tmp_path / "new" / "nested", tmp_path / "empty"):  # absent (parents made) and empty
        out = restore_folder(target, tmp_path / "b.zip", who="Bo")
        assert out["mode"] == "new" and (out["datasets"], out["snapshots"]) == (2, 2)
        assert _raw_files(target) == _raw_files(src)
        assert _records(target) == _records(src)
        restored = Store(target)
        for rec in Store(src).list_datasets():
            assert restored.get_dataset(rec["id"]) == rec
            assert _sha(restored.read_raw(rec["id"])) == rec["sha256"]
        actions = [(e["action"], e["who"]) for e in restored.list_audit()]
        assert actions[0] == ("restore", "Bo") and ("upload", "Ana") in actions  # the folder's history came along
        assert not [p for p in target.parent.iterdir() if ".restore-" in p.name]


def test_non_empty_folder_is_refused_without_merge(tmp_path):
    _make_folder(tmp_path / "src")
    backup_folder(tmp_path / "src", tmp_path / "b.zip")
    target = tmp_path / "busy"
    target.mkdir()
    (target / "notes.txt").write_text("mine")
    with pytest.raises(BackupError, match="not empty.*--merge"):
        restore_folder(target, tmp_path / "b.zip")
    assert [p.name for p in target.iterdir()] == ["notes.txt"]
    with pytest.raises(BackupError, match="holds no Scalewright database"):
        restore_folder(target, tmp_path / "b.zip", merge=True)
    assert [p.name for p in target.iterdir()] == ["notes.txt"]


def _assert_untouched(target: Path, parent: Path, before: set[str]) -> None:
    assert not target.exists()
    assert {p.name for p in parent.iterdir()} == before  # no staging folder, no temp file


@pytest.mark.parametrize("member", ["raw", "db"])
def test_one_altered_byte_is_refused_before_anything_is_written(tmp_path, member):
    _make_folder(tmp_path / "src")
    good = tmp_path / "b.zip"
    backup_folder(tmp_path / "src", good)
    bad = tmp_path / "bad.zip"
    wanted = (lambda n: n.endswith("/raw")) if member == "raw" else (lambda n: n == DB_NAME)
    _rewrite(good, bad, lambda name, data: _flip(data) if wanted(name) else data)
    parent = tmp_path / "out"
    parent.mkdir()
    with pytest.raises(BackupError, match="does not match its SHA-256"):
        restore_folder(parent / "data", bad)
    _assert_untouched(parent / "data", parent, set())


def test_one_flipped_byte_in_the_zip_file_is_refused(tmp_path):
    _make_folder(tmp_path / "src")
    good = tmp_path / "b.zip"
    backup_folder(tmp_path / "src", good)
    with zipfile.ZipFile(good) as zf:
        info = zf.getinfo(DB_NAME)
    data = good.read_bytes()
    # the first byte of the member's compressed data: after its 30-byte local header, name and extra field
    name_len, extra_len = int.from_bytes(data[info.header_offset + 26:info.header_offset + 28], "little"), \
        int.from_bytes(data[info.header_offset + 28:info.header_offset + 30], "little")
    start = info.header_offset + 30 + name_len + extra_len
    bad = tmp_path / "bad.zip"
    bad.write_bytes(_flip(data, start + info.compress_size // 2))
    parent = tmp_path / "out"
    parent.mkdir()
    with pytest.raises(BackupError, match="damaged|does not match|has .* bytes"):
        restore_folder(parent / "data", bad)
    _assert_untouched(parent / "data", parent, set())


def _forge(zip_out: Path, members: dict[str, bytes], manifest_files=None, **manifest_extra) -> None:
    files = manifest_files if manifest_files is not None else [
        {"path": n, "size": len(d), "sha256": _sha(d)} for n, d in members.items()]
    manifest = {"format": "scalewright-backup", "format_version": 1, "software_version": "0.1.0",
                "schema_version": SCHEMA_VERSION, "created_at": "2026-01-01T00:00:00Z", "files": files,
                **manifest_extra}
    with zipfile.ZipFile(zip_out, "w") as zf:
        for n, d in members.items():
            zf.writestr(n, d)
        zf.writestr("manifest.json", json.dumps(manifest))


@pytest.mark.parametrize("evil", ["../evil", "/tmp/evil", "datasets/../../evil", "datasets/x/raw/../../../evil",
                                  "notes.txt", "datasets/a b/raw"])
def test_unexpected_member_names_are_refused(tmp_path, evil):
    _make_folder(tmp_path / "src")
    backup_folder(tmp_path / "src", tmp_path / "b.zip")
    with zipfile.ZipFile(tmp_path / "b.zip") as zf:
        members = {n: zf.read(n) for n in zf.namelist() if n != "manifest.json"}
    members[evil] = b"gotcha"
    _forge(tmp_path / "evil.zip", members)
    with pytest.raises(BackupError, match="unexpected member"):
        restore_folder(tmp_path / "out", tmp_path / "evil.zip")
    assert not (tmp_path / "out").exists() and not (tmp_path / "evil").exists()


def test_manifest_must_list_exactly_the_zip_members(tmp_path):
    _make_folder(tmp_path / "src")
    backup_folder(tmp_path / "src", tmp_path / "b.zip")
    with zipfile.ZipFile(tmp_path / "b.zip") as zf:
        members = {n: zf.read(n) for n in zf.namelist() if n != "manifest.json"}
        listed = json.loads(zf.read("manifest.json"))["files"]
    _forge(tmp_path / "missing.zip", members, manifest_files=listed[:-1])
    with pytest.raises(BackupError, match="does not list exactly"):
        restore_folder(tmp_path / "out", tmp_path / "missing.zip")
    extra = dict(members, **{"datasets/feedbeef/raw": b"x"})
    _forge(tmp_path / "orphan.zip", extra)
    with pytest.raises(BackupError, match="belongs to no dataset"):
        restore_folder(tmp_path / "out", tmp_path / "orphan.zip")
    _forge(tmp_path / "newer.zip", members, schema_version=SCHEMA_VERSION + 1)
    with pytest.raises(BackupError, match="newer Scalewright"):
        restore_folder(tmp_path / "out", tmp_path / "newer.zip")
    (tmp_path / "not.zip").write_bytes(b"hello")
    with pytest.raises(BackupError, match="not a readable zip"):
        restore_folder(tmp_path / "out", tmp_path / "not.zip")
    assert not (tmp_path / "out").exists()


def test_declared_size_limit(tmp_path):
    _make_folder(tmp_path / "src")
    backup_folder(tmp_path / "src", tmp_path / "b.zip")
    with pytest.raises(BackupError, match="more than the 100 bytes allowed") as info:
        restore_folder(tmp_path / "out", tmp_path / "b.zip", max_bytes=100)
    assert info.value.status == 413 and not (tmp_path / "out").exists()


def test_merge_adds_new_skips_identical_and_refuses_conflicts(tmp_path):
    src = tmp_path / "src"
    store = _make_folder(src)
    backup_folder(src, tmp_path / "b.zip")
    target = tmp_path / "target"
    restore_folder(target, tmp_path / "b.zip")
    mine = Store(target)
    gone = mine.list_datasets()[0]["id"]
    mine.delete_dataset(gone)
    local = mine.add_dataset(name="local", raw=b"id,X1,X2\n1,1,2\n2,2,1\n", filename="l.csv", options={}, meta={})
    out = restore_folder(target, tmp_path / "b.zip", merge=True, who="Cy")
    assert out["datasets_added"] == [gone] and len(out["datasets_skipped"]) == 1
    assert out["snapshots_added"] == [] and len(out["snapshots_skipped"]) == 2
    assert mine.get_dataset(local["id"]) is not None and mine.get_dataset(gone) == store.get_dataset(gone)
    assert _sha(mine.read_raw(gone)) == store.get_dataset(gone)["sha256"]
    entry = mine.list_audit(limit=1)[0]
    assert (entry["action"], entry["who"], entry["details"]["datasets_added"]) == ("restore", "Cy", [gone])

    # a snapshot with the same id but another record: the whole merge is refused, nothing changes
    other = tmp_path / "other.zip"

    def tamper(name, data):
        if name != DB_NAME:
            return data
        path = tmp_path / "tamper.sqlite3"
        path.write_bytes(data)
        con = sqlite3.connect(path)
        con.execute("DROP TRIGGER snapshots_no_update")
        con.execute("UPDATE snapshots SET record = replace(record, '\"snap 0\"', '\"snap zero\"')")
        con.commit()
        con.close()
        return path.read_bytes()

    with zipfile.ZipFile(tmp_path / "b.zip") as zf:
        members = {n: zf.read(n) for n in zf.namelist() if n != "manifest.json"}
    members = {n: tamper(n, d) for n, d in members.items()}
    _forge(other, members)  # a consistent, re-hashed zip whose snapshot differs
    before = (_records(target), _raw_files(target), len(mine.list_audit()))
    with pytest.raises(RestoreConflict, match="same id as a different snapshot") as info:
        restore_folder(target, other, merge=True)
    assert info.value.status == 409 and info.value.details["conflicts"]
    assert (_records(target), _raw_files(target), len(mine.list_audit())) == before


def test_restore_of_a_version_1_backup_is_migrated(tmp_path):
    src = tmp_path / "v1"
    shutil.copytree(V1, src)
    out = backup_folder(src, tmp_path / "v1.zip")
    assert out["schema_version"] == 1 and out["audited"] is False  # an old folder is not migrated by a backup
    con = sqlite3.connect(src / DB_NAME)
    assert con.execute("SELECT value FROM meta WHERE key = 'schema_version'").fetchone() == ("1",)
    con.close()
    restore_folder(tmp_path / "new", tmp_path / "v1.zip")
    store = Store(tmp_path / "new")
    assert [e["action"] for e in store.list_audit()] == ["restore", "schema_upgrade"]
    assert _records(tmp_path / "new") == _records(src)


# ---------------------------------------------------------------- command line

def _cli(*args: str) -> subprocess.CompletedProcess:
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    return subprocess.run([sys.executable, "-m", "server", *args], capture_output=True, text=True, env=env,
                          cwd=ROOT, timeout=120, check=False)


def test_cli_round_trip(tmp_path):
    src = tmp_path / "src"
    _make_folder(src)
    zip_path = tmp_path / "ws.zip"
    r = _cli("backup", "--data-dir", str(src), "--out", str(zip_path))
    assert r.returncode == 0, r.stderr
    assert r.stdout.count("\n") == 1 and "2 datasets and 2 snapshots" in r.stdout
    r = _cli("restore", "--data-dir", str(tmp_path / "dst"), str(zip_path))
    assert r.returncode == 0, r.stderr
    assert r.stdout.count("\n") == 1 and r.stdout.startswith("Restored 2 datasets and 2 snapshots")
    assert _records(tmp_path / "dst") == _records(src) and _raw_files(tmp_path / "dst") == _raw_files(src)

    r = _cli("restore", "--data-dir", str(tmp_path / "dst"), str(zip_path))
    assert r.returncode == 1 and r.stdout == ""
    assert r.stderr.count("\n") == 1 and "not empty" in r.stderr and "Traceback" not in r.stderr

    r = _cli("restore", "--data-dir", str(tmp_path / "dst"), str(zip_path), "--merge")
    assert r.returncode == 0 and "added 0 datasets and 0 snapshots; skipped 2 datasets and 2 snapshots" in r.stdout

    bad = tmp_path / "bad.zip"
    _rewrite(zip_path, bad, lambda n, d: _flip(d) if n.endswith("/raw") else d)
    r = _cli("restore", "--data-dir", str(tmp_path / "fresh"), str(bad))
    assert r.returncode == 1 and r.stderr.count("\n") == 1 and "SHA-256" in r.stderr and "Traceback" not in r.stderr
    assert not (tmp_path / "fresh").exists()

    r = _cli("backup", "--data-dir", str(tmp_path / "nothing"), "--out", str(tmp_path / "x.zip"))
    assert r.returncode == 1 and r.stderr.count("\n") == 1 and "Traceback" not in r.stderr



def test_cli_restore_refuses_a_folder_a_server_holds_and_ignores_a_stale_lock(tmp_path):
    from server.store import LOCK_NAME, lock_data_dir

    src = tmp_path / "src"
    _make_folder(src)
    zip_path = tmp_path / "ws.zip"
    assert _cli("backup", "--data-dir", str(src), "--out", str(zip_path)).returncode == 0

    held = tmp_path / "held"
    lock = lock_data_dir(held, port=8799)  # what `scalewright serve` takes for its whole life
    try:
        r = _cli("restore", "--data-dir", str(held), str(zip_path), "--merge")
        assert r.returncode == 1 and r.stderr.count("\n") == 1 and "Traceback" not in r.stderr
        assert "port 8799" in r.stderr and "stop it first" in r.stderr
    finally:
        lock.release()
    # the server is gone; its lock file stays behind as information and does not make the folder "in use"
    assert (held / LOCK_NAME).exists()
    r = _cli("restore", "--data-dir", str(held), str(zip_path))
    assert r.returncode == 0, r.stderr
    assert _records(held) == _records(src)
