"""POST /api/agreement/upload reads its file through intake (read_ratings): UTF-16 text, and the ID rule of
response files (a file's first column is the unit ID exactly when POST /api/datasets takes it as the ID)."""
from __future__ import annotations

import pytest

RATINGS = [[1, 2, 2], [3, 3, 4], [2, 2, 2], [4, 5, 4], [1, 1, 2], [5, 4, 5], [2, 3, 3], [4, 4, 4], [3, 2, 3],
           [1, 1, 1], [5, 5, 4], [2, 2, 3]]  # invented, 12 units x 3 raters


def ratings_file(first: str, values: list, sep: str = ",") -> str:
    lines = [sep.join([first, "amira", "bo", "chen"])]
    lines += [sep.join([str(v), *map(str, r)]) for v, r in zip(values, RATINGS, strict=True)]
    return "\r\n".join(lines) + "\r\n"


def upload(client, raw: bytes, name: str = "coders.csv", **form):
    return client.post("/api/agreement/upload", files={"file": (name, raw, "text/csv")},
                       data={"level": "ordinal", **form})


def test_utf16_rater_file_as_excel_saves_unicode_text(client):
    raw = ratings_file("unit", [f"U{i}" for i in range(12)], sep="\t").encode("utf-16")
    r = upload(client, raw, "coders.txt")
    assert r.status_code == 200, r.text
    body = r.json()
    assert body["raters"] == ["amira", "bo", "chen"] and body["unit_ids"][:2] == ["U0", "U1"]
    assert body["n_units"] == 12 and body["n_raters"] == 3 and body["file"] == "coders.txt"
    plain = upload(client, ratings_file("unit", [f"U{i}" for i in range(12)]).encode()).json()
    assert body["krippendorff_alpha"] == plain["krippendorff_alpha"]  # the same table, whatever the encoding


def test_latin1_file_says_how_it_was_read(client):
    raw = ratings_file("fall", [f"F{i}" for i in range(12)]).replace("amira", "Jürgen").encode("latin-1")
    body = upload(client, raw).json()
    assert body["raters"][0] == "Jürgen"
    first = body["warnings"][0]
    assert first["code"] == "ratings_file" and "Latin-1" in first["message"]


@pytest.mark.parametrize("first,values", [
    ("respondent_id", [f"r{i}" for i in range(12)]),
    ("code", [f"L{i:02d}" for i in range(12)]),
    ("seq", list(range(1, 13))),
    ("dan", [1, 2, 2, 4, 5, 1, 2, 3, 3, 5, 1, 2]),
])
def test_the_id_column_rule_is_that_of_response_files(client, first, values):
    raw = ratings_file(first, values).encode()
    dataset = client.post("/api/datasets", files={"file": ("t.csv", raw)})
    assert dataset.status_code in (200, 201), dataset.text
    rated = upload(client, raw).json()
    assert (rated["unit_ids"] is not None) == (dataset.json()["id_column"] == first)
    assert (rated["unit_ids"] is not None) == (first != "dan")


def test_unreadable_rater_files_get_the_intake_errors(client):
    r = upload(client, b"%PDF-1.4\x00\x01binary", "scan.pdf")
    assert r.status_code == 422 and r.json()["error"]["code"] == "not_a_table"
    assert r.json()["error"]["details"]["file"] == "scan.pdf"
    r = upload(client, b"unit,ann,bob\nu1,1,2\nu2,3\n")
    assert r.status_code == 422 and r.json()["error"]["code"] == "ragged_row"
    assert r.json()["error"]["details"]["row"] == 3
