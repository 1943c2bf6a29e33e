"""Alembic migrations of the SQL store on SQLite and PostgreSQL: a database at the first revision, holding a
dataset and a snapshot, is upgraded at start with its data; a newer database is refused; `scalewright migrate`
runs them alone."""
from __future__ import annotations

import hashlib
import json

import pytest
import sqlalchemy as sa

from server.__main__ import main
from server.sqlstore import SqlStore, current_revision, head_revision, make_engine, upgrade
from server.store import SchemaVersionError

RAW = b"id,Q1,Q2\n1,1,2\n2,3,4\n"


def _first_revision_with_data(url: str) -> dict:
    """Make the revision-0001 schema and write one dataset and one snapshot with plain SQL, as 0001's code did."""
    engine = make_engine(url)
    assert upgrade(engine, "0001") == (None, "0001")
    rows = {"dataset": {"seq": None, "id": "d0000000000000a1", "name": "wave 1", "filename": "w1.csv",
                        "codebook_filename": None, "sha256": hashlib.sha256(RAW).hexdigest(),
                        "codebook_sha256": None, "size_bytes": len(RAW), "options": '{"id_column":"id"}',
                        "meta": '{"n_rows":2}', "created_at": "2026-01-02T03:04:05.000006Z"},
            "snapshot": {"id": "s0000000000000b2", "dataset_id": "d0000000000000a1",
                         "created_at": "2026-01-02T03:05:00.000000Z",
                         "record": json.dumps({"name": "first cut", "items": ["Q1"], "id": "s0000000000000b2",
                                               "dataset_id": "d0000000000000a1",
                                               "created_at": "2026-01-02T03:05:00.000000Z"})}}
    with engine.begin() as con:
        d = {k: v for k, v in rows["dataset"].items() if k != "seq"}
        con.execute(sa.text("INSERT INTO datasets (id, name, filename, codebook_filename, sha256, codebook_sha256, "
                            "size_bytes, options, meta, created_at) VALUES (:id, :name, :filename, "
                            ":codebook_filename, :sha256, :codebook_sha256, :size_bytes, :options, :meta, "
                            ":created_at)"), d)
        con.execute(sa.text("INSERT INTO dataset_files (dataset_id, kind, part, data) VALUES (:d, 'raw', 0, :b)"),
                    {"d": d["id"], "b": RAW})
        con.execute(sa.text("INSERT INTO snapshots (id, dataset_id, created_at, record) "
                            "VALUES (:id, :dataset_id, :created_at, :record)"), rows["snapshot"])
        assert not sa.inspect(con).has_table("audit")
    engine.dispose()
    return rows


def test_first_revision_database_is_upgraded_at_start_with_its_data(sql_url):
    rows = _first_revision_with_data(sql_url)
    store = SqlStore(sql_url)
    assert store.revision == head_revision() == "0004"
    ds = store.get_dataset("d0000000000000a1")
    assert ds["name"] == "wave 1" and ds["options"] == {"id_column": "id"} and ds["meta"] == {"n_rows": 2}
    assert ds["created_at"] == rows["dataset"]["created_at"]
    assert store.read_raw(ds["id"]) == RAW and ds["sha256"] == hashlib.sha256(RAW).hexdigest()
    assert store.list_snapshots(ds["id"]) == [json.loads(rows["snapshot"]["record"])]
    (entry,) = store.list_audit()
    assert entry["action"] == "schema_upgrade" and entry["details"] == {"from": "0001", "to": "0004"}
    # the new revision works and keeps the old rows immutable
    store.audit("upload", who="Ana", dataset_id=ds["id"])
    with pytest.raises(sa.exc.DBAPIError, match="immutable"), store.engine.begin() as con:
        con.execute(sa.text("DELETE FROM snapshots"))
    store.close()
    again = SqlStore(sql_url)  # opening again does not migrate again
    assert [e["action"] for e in again.list_audit()] == ["upload", "schema_upgrade"]
    again.close()


def test_a_database_from_a_newer_scalewright_is_refused(sql_url):
    SqlStore(sql_url).close()
    engine = make_engine(sql_url)
    with engine.begin() as con:
        con.execute(sa.text("UPDATE alembic_version SET version_num = '0099'"))
    with pytest.raises(SchemaVersionError, match="newer Scalewright.*0099"):
        SqlStore(sql_url)
    with engine.connect() as con:
        assert current_revision(con) == "0099"  # nothing was written
    engine.dispose()


def test_migrate_command_runs_the_migrations_alone(sql_url, capsys):
    _first_revision_with_data(sql_url)
    assert main(["migrate", "--database", sql_url]) == 0
    out = capsys.readouterr().out
    assert "from schema 0001 to 0004" in out
    assert main(["migrate", "--database", sql_url]) == 0
    assert "up to date (schema 0004)" in capsys.readouterr().out
    engine = make_engine(sql_url)
    with engine.connect() as con:
        assert current_revision(con) == "0004"
        assert con.execute(sa.text("SELECT count(*) FROM snapshots")).scalar() == 1
    engine.dispose()


def test_migrate_command_on_a_bad_database_is_one_line(tmp_path, capsys):
    assert main(["migrate", "--database", f"postgresql://nobody@/x?host={tmp_path}"]) == 1
    err = capsys.readouterr().err
    assert err.startswith("scalewright migrate: ") and err.count("\n") == 1


def test_migrate_command_on_the_data_folder(tmp_path, capsys):
    assert main(["migrate", "--data-dir", str(tmp_path / "data")]) == 0
    out = capsys.readouterr().out
    assert f"{tmp_path / 'data' / 'scalewright.db'} from schema none to {head_revision()}" in out
    assert main(["migrate", "--data-dir", str(tmp_path / "data")]) == 0
    assert f"up to date (schema {head_revision()})" in capsys.readouterr().out
