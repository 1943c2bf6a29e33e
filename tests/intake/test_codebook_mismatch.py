"""Issue 12 item 8: when a codebook matches none of the file's columns, the refusal lists the first ten
columns it left out and says how many more there are."""
from __future__ import annotations

import numpy as np
import pytest

from server.intake.responses import read_responses
from server.stats.errors import InputError
from tests.conftest import local_client


def mismatched(n_columns: int) -> tuple[bytes, bytes]:
    """A file of items A1..An and a codebook of Q1..Q20: no column is in the codebook."""
    rng = np.random.default_rng(12)
    cols = [f"A{i}" for i in range(1, n_columns + 1)]
    rows = [",".join(cols)] + [",".join(str(v) for v in rng.integers(1, 6, n_columns)) for _ in range(20)]
    book = "item,text,construct,reverse,min,max\n" + "\n".join(f"Q{i},Text {i},c,0,1,5" for i in range(1, 21))
    return "\n".join(rows).encode(), book.encode()


def refusal(n_columns: int) -> InputError:
    raw, book = mismatched(n_columns)
    with pytest.raises(InputError) as info:
        read_responses(raw, "pool.csv", codebook_raw=book, codebook_filename="book.csv")
    return info.value


def test_more_than_ten_left_out_columns_say_how_many_more():
    err = refusal(30)
    assert err.code == "too_few_items"
    assert "A10 (not in the codebook) and 20 more." in str(err)
    assert "A11" not in str(err)
    assert len(err.details["left_out"]) == 30  # the details keep every column


def test_ten_or_fewer_left_out_columns_have_no_more():
    err = refusal(10)
    assert "A10 (not in the codebook)." in str(err) and "more" not in str(err)


def test_the_upload_answers_422_with_the_count(app):
    raw, book = mismatched(14)
    with local_client(app) as client:
        r = client.post("/api/datasets", files={"file": ("pool.csv", raw, "text/csv"),
                                                "codebook": ("book.csv", book, "text/csv")})
    assert r.status_code == 422, r.text
    assert r.json()["error"]["code"] == "too_few_items"
    assert "and 4 more." in r.json()["error"]["message"]


def test_more_than_ten_sparse_items_say_how_many_more():
    """The note on items missing for most respondents names ten and counts the rest."""
    rng = np.random.default_rng(3)
    cols = [f"S{i}" for i in range(1, 15)] + ["F1", "F2"]
    rows = [",".join(cols)]
    for r in range(12):
        sparse = ["" if r >= 2 else str(v) for v in rng.integers(1, 6, 14)]  # answered by 2 of 12
        rows.append(",".join([*sparse, *(str(v) for v in rng.integers(1, 6, 2))]))
    got = read_responses("\n".join(rows).encode(), "pool.csv")
    note = next(w for w in got.warnings if "missing for more than half" in w)
    assert "14 items are missing" in note and "'S10' (10 of 12) and 4 more." in note
    assert "'S11'" not in note
