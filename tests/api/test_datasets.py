"""Datasets API: upload, list, read, delete; every bad input is a 4xx with the one JSON error shape."""
from __future__ import annotations

import hashlib
import io
import random
from pathlib import Path

import openpyxl
import pytest

from server.app import create_app
from tests.conftest import local_client

REF = Path(__file__).parent.parent / "reference" / "intake"
GOOD = b"id,Q1,Q2,Q3\n1,1,2,3\n2,2,3,4\n3,4,5,5\n4,5,4,2\n"
ITEM_KEYS = {"name", "text", "construct", "reverse", "min", "max", "n_missing", "range_source"}


def _upload(client, raw=GOOD, filename="pool.csv", codebook=None, **fields):
    files = {"file": (filename, raw, "text/csv")}
    if codebook is not None:
        files["codebook"] = codebook
    return client.post("/api/datasets", files=files, data={k: str(v) for k, v in fields.items()})


def _error(r, status=None):
    assert 400 <= r.status_code < 500, r.text
    if status is not None:
        assert r.status_code == status
    body = r.json()
    assert set(body) == {"error"} and set(body["error"]) == {"code", "message", "details"}
    return body["error"]


def test_upload_answers_201_with_the_dataset(client):
    r = _upload(client, missing_codes="-9, 99", scale_min=1, scale_max=5, name="Belonging pilot")
    assert r.status_code == 201
    body = r.json()
    assert {"id", "name", "n_rows", "items", "warnings", "sha256", "id_column", "created_at"} <= set(body)
    assert body["name"] == "Belonging pilot" and body["n_rows"] == 4 and body["id_column"] == "id"
    assert [it["name"] for it in body["items"]] == ["Q1", "Q2", "Q3"]
    assert set(body["items"][0]) == ITEM_KEYS
    assert body["items"][0]["range_source"] == "form" and body["items"][0]["max"] == 5
    assert body["sha256"] == hashlib.sha256(GOOD).hexdigest()  # hashlib on the uploaded bytes
    assert body["options"] == {"missing_codes": [-9.0, 99.0], "id_column": None, "scale_min": 1.0,
                               "scale_max": 5.0}
    assert any("'id'" in w for w in body["warnings"])


def test_get_list_delete(client):
    a = _upload(client).json()
    b = _upload(client, filename="second.csv").json()
    assert b["name"] == "second"
    assert client.get(f"/api/datasets/{a['id']}").json() == a
    assert [d["id"] for d in client.get("/api/datasets").json()] == [b["id"], a["id"]]
    r = client.delete(f"/api/datasets/{a['id']}")
    assert r.status_code == 204 and r.content == b""
    assert _error(client.get(f"/api/datasets/{a['id']}"), 404)["code"] == "not_found"
    assert _error(client.delete(f"/api/datasets/{a['id']}"), 404)["details"] == {"dataset": a["id"]}
    assert [d["id"] for d in client.get("/api/datasets").json()] == [b["id"]]


def test_engine_forgets_on_add_and_delete(app, client):
    calls = []
    original = getattr(app.state.engine, "forget", None)

    def spy(dataset_id):
        calls.append(dataset_id)
        if callable(original):
            original(dataset_id)

    app.state.engine.forget = spy
    ds = _upload(client).json()
    client.delete(f"/api/datasets/{ds['id']}")
    assert calls == [ds["id"], ds["id"]]


def test_codebook_upload_and_warnings(client):
    raw = (REF / "pilot_semicolon_latin1.csv").read_bytes()
    cb = (REF / "pilot_codebook.csv").read_bytes()
    r = _upload(client, raw, "pilot.csv", codebook=("pilot_codebook.csv", cb, "text/csv"), missing_codes="-9")
    assert r.status_code == 201
    body = r.json()
    assert body["codebook_filename"] == "pilot_codebook.csv"
    by = {it["name"]: it for it in body["items"]}
    assert by["F3"]["reverse"] is True and by["F1"]["construct"] == "belonging"
    assert by["F1"]["range_source"] == "codebook" and by["F4"]["range_source"] == "observed"
    text = " ".join(body["warnings"])
    assert "Latin-1" in text and "'F9'" in text and "dropped" in text


def test_xlsx_upload(client):
    wb = openpyxl.Workbook()
    ws = wb.active
    for row in (["ID", "A1", "A2", "A3"], ["p1", 1, 2, 3], ["p2", 3, 3, 4], ["p3", 5, 4, 5]):
        ws.append(row)
    buf = io.BytesIO()
    wb.save(buf)
    r = _upload(client, buf.getvalue(), "pool.xlsx")
    assert r.status_code == 201, r.text
    assert r.json()["id_column"] == "ID" and r.json()["n_rows"] == 3


def test_empty_browser_codebook_part_is_ignored(client):
    r = client.post("/api/datasets", files={"file": ("pool.csv", GOOD), "codebook": ("", b"")})
    assert r.status_code == 201 and r.json()["codebook_filename"] is None


@pytest.mark.parametrize("raw, code, where", [
    (b"", "empty_file", {}),
    (b"a single column\nof text\n", "not_a_table", {}),
    (b"%PDF-1.7\x00\x00\x01binary", "not_a_table", {}),
    (b"Q1,Q2,Q1\n1,2,3\n2,3,4\n3,4,5\n", "duplicate_columns", {"column": "Q1"}),
    (b"id,Q1,notes\n1,2,a\n2,3,b\n3,4,c\n", "too_few_items", {}),
    (b"Q1,Q2\n1,2\n2,3\n", "too_few_respondents", {"n_rows": 2}),
    (b"Q1,Q2,Q3\n1,2,3\n2,3,4\n3,oops,5\n4,5,1\n", "non_numeric", {"column": "Q2", "row": 4, "value": "oops"}),
    (b"Q1,Q2,Q3\n1,2,3\n2,3,4,5\n3,4,5\n", "ragged_row", {"row": 3, "expected": 3, "found": 4}),
])
def test_bad_files_are_4xx_naming_file_column_row_value(client, raw, code, where):
    err = _error(_upload(client, raw, "bad.csv"))
    assert err["code"] == code
    assert err["details"]["file"] == "bad.csv"
    assert "bad.csv" in err["message"]
    for key, value in where.items():
        assert err["details"][key] == value


def test_bad_form_fields(client):
    err = _error(_upload(client, missing_codes="-9, lots"), 422)
    assert err["details"] == {"field": "missing_codes", "value": "lots"}
    err = _error(_upload(client, scale_min="low", scale_max=5), 422)
    assert err["details"]["field"] == "scale_min"
    assert _error(_upload(client, scale_min=5, scale_max=1))["code"] == "bad_range"
    err = _error(_upload(client, id_column="Respondent"))
    assert err["code"] == "unknown_column" and err["details"]["column"] == "Respondent"


def test_explicit_id_column(client):
    body = _upload(client, b"Q1,Q2,Q3,code\n1,2,3,7\n2,3,4,8\n3,4,5,9\n", id_column="code").json()
    assert body["id_column"] == "code" and len(body["items"]) == 3


def test_bad_codebook_names_codebook_file(client):
    err = _error(_upload(client, codebook=("cb.csv", b"item,reverse\nQ1,sometimes\n", "text/csv")))
    assert err["code"] == "bad_codebook" and err["details"]["file"] == "cb.csv"
    assert err["details"]["row"] == 2 and err["details"]["value"] == "sometimes"


def test_missing_file_field_and_not_multipart(client):
    assert _error(client.post("/api/datasets", files={"name": (None, "x")}), 422)["code"] == "missing_file"
    assert _error(client.post("/api/datasets", json={"file": "Q1,Q2"}), 415)["code"] == "unsupported_media_type"


def test_garbage_never_gives_a_500(client):
    rng = random.Random(20261202)
    blobs = [bytes(rng.randrange(256) for _ in range(rng.randrange(1, 400))) for _ in range(8)]
    lines = GOOD.split(b"\n")
    for _ in range(12):  # shuffled / truncated / mangled versions of a good file
        mangled = list(lines)
        rng.shuffle(mangled)
        text = b"\n".join(mangled)
        cut = rng.randrange(len(text))
        blobs.append(text[:cut] + bytes([rng.randrange(256)]) + text[cut + 1:])
    blobs += [b"PK\x03\x04" + bytes(50), b"\xd0\xcf\x11\xe0old xls", b"\xff\xfeQ\x001\x00", b'"unterminated,1,2\n3']
    for i, blob in enumerate(blobs):
        for name in ("g.csv", "g.xlsx"):
            r = _upload(client, blob, name)
            assert r.status_code == 201 or 400 <= r.status_code < 500, (i, name, r.status_code, r.text)
            if r.status_code != 201:
                assert set(r.json()["error"]) == {"code", "message", "details"}


# ---- size limit


@pytest.fixture
def small_client(make_settings):
    settings = make_settings(max_upload_mb=0.1)  # 104,857 bytes
    with local_client(create_app(settings)) as c:
        yield c


def _big_csv(n_rows: int) -> bytes:
    return b"Q1,Q2,Q3\n" + b"1,2,3\n" * n_rows


def test_413_from_content_length(small_client):
    raw = _big_csv(40_000)  # 240 kB > 100 kB + multipart slack
    err = _error(_upload(small_client, raw), 413)
    assert err["code"] == "too_large" and err["details"]["limit_bytes"] == 104_857
    assert "limit of 0.1 MB" in err["message"]


def test_413_counted_while_reading_without_content_length(small_client):
    boundary = "sw-boundary"
    body = (f"--{boundary}\r\nContent-Disposition: form-data; name=\"file\"; filename=\"big.csv\"\r\n"
            f"Content-Type: text/csv\r\n\r\n").encode() + _big_csv(40_000) + f"\r\n--{boundary}--\r\n".encode()

    def chunks():  # a generator body is sent chunked, with no Content-Length header
        for i in range(0, len(body), 8192):
            yield body[i:i + 8192]

    r = small_client.post("/api/datasets", content=chunks(),
                          headers={"content-type": f"multipart/form-data; boundary={boundary}"})
    assert _error(r, 413)["code"] == "too_large"


def test_413_for_a_file_just_over_the_limit(small_client):
    raw = _big_csv(17_500)  # 105,009 bytes: over 104,857 but within the multipart slack
    assert len(raw) > 104_857
    assert _error(_upload(small_client, raw), 413)["code"] == "too_large"
    assert _upload(small_client, _big_csv(17_000)).status_code == 201


# ---- restart


def test_dataset_survives_a_restart(make_settings):
    settings = make_settings()
    raw = (REF / "pilot_semicolon_latin1.csv").read_bytes()
    with local_client(create_app(settings)) as c1:
        first = _upload(c1, raw, "pilot.csv", missing_codes="-9").json()
    with local_client(create_app(make_settings())) as c2:
        again = c2.get(f"/api/datasets/{first['id']}")
        assert again.status_code == 200
        assert again.json() == first
        assert again.json()["sha256"] == hashlib.sha256(raw).hexdigest()  # hashlib on the same bytes
        assert [d["id"] for d in c2.get("/api/datasets").json()] == [first["id"]]
        stored = c2.app.state.store.read_raw(first["id"])
        assert stored == raw  # kept byte for byte


def test_an_uploaded_file_can_be_analysed(client):
    import pandas as pd
    import pingouin
    import semopy

    path = Path(semopy.__file__).parent / "examples" / "holzinger_swineford39_data.csv"
    ds = _upload(client, path.read_bytes(), path.name).json()
    assert [it["name"] for it in ds["items"]] == [f"x{i}" for i in range(1, 10)]
    r = client.post(f"/api/datasets/{ds['id']}/analysis", json={})
    assert r.status_code == 200, r.text
    items = pd.read_csv(path)[[f"x{i}" for i in range(1, 10)]]
    expected, _ = pingouin.cronbach_alpha(items)  # pingouin on the same nine columns (no missing values)
    assert round(r.json()["reliability"]["alpha"], 6) == round(expected, 6)


def test_client_paths_are_stripped_from_file_names(client):
    body = _upload(client, filename="C:\\Users\\ana\\pilot data.csv").json()
    assert body["filename"] == "pilot data.csv" and body["name"] == "pilot data"
