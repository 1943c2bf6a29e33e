"""read_ratings: a units x raters file read with the decoding and the ID rule of response files."""
from __future__ import annotations

import io

import numpy as np
import pandas as pd
import pytest

from server.intake import read_ratings, read_responses
from server.stats.errors import InputError

RATERS = [[1, 2, 2], [3, 3, 4], [2, 2, 2], [4, 5, 4], [1, 1, 2], [5, 4, 5], [2, 3, 3], [4, 4, 4], [3, 2, 3],
          [1, 1, 1], [5, 5, 4], [2, 2, 3]]  # invented ratings, 12 units x 3 raters


def table(first_name: str, first_values: list) -> str:
    lines = [f"{first_name},amira,bo,chen"]
    lines += [f"{v}," + ",".join(map(str, r)) for v, r in zip(first_values, RATERS, strict=True)]
    return "\n".join(lines) + "\n"


def test_utf16_tab_separated_ratings_are_read():
    text = "unit\tamira\tbo\r\nL01\t1\t2\r\nL02\t3\t\r\nL03\tja\tnein\r\n"
    got = read_ratings(text.encode("utf-16"), "coders.txt")
    assert got.unit_ids == ["L01", "L02", "L03"] and got.id_column == "unit"
    assert got.raters == ["amira", "bo"]
    assert got.ratings == [["1", "2"], ["3", None], ["ja", "nein"]]
    assert got.warnings == ()


def test_latin1_file_is_read_with_a_coded_warning():
    raw = "fall;Ärztin;Pfleger\nA;gut;schlecht\nB;gut;gut\n".encode("latin-1")
    got = read_ratings(raw, "kodierung.csv")
    assert got.raters == ["fall", "Ärztin", "Pfleger"] and got.unit_ids is None  # codes need 3 rows
    assert [w.code for w in got.warnings] == ["ratings_file"]
    assert "Latin-1" in got.warnings[0].message


def test_id_column_yes_and_no_override_the_rule():
    raw = table("amy", [1, 2, 3, 4, 5, 1, 2, 3, 4, 5, 1, 2]).encode()
    assert read_ratings(raw, "r.csv").unit_ids is None
    forced = read_ratings(raw, "r.csv", id_column="yes")
    assert forced.unit_ids[:3] == ["1", "2", "3"] and forced.raters == ["amira", "bo", "chen"]
    raw = table("unit", list(range(1, 13))).encode()
    assert read_ratings(raw, "r.csv", id_column="no").raters == ["unit", "amira", "bo", "chen"]


def test_unnamed_first_column_holds_unit_labels():
    got = read_ratings(table("", ["a", "b", "c", "d", "a", "b", "c", "d", "a", "b", "c", "d"]).encode(), "r.csv")
    assert got.unit_ids[:2] == ["a", "b"] and got.raters == ["amira", "bo", "chen"]


def test_a_workbook_of_ratings():
    df = pd.DataFrame({"case_id": ["c1", "c2", "c3"], "r1": [1, 2, None], "r2": [1, 3, 2]})
    buf = io.BytesIO()
    df.to_excel(buf, index=False)
    got = read_ratings(buf.getvalue(), "r.xlsx")
    assert got.unit_ids == ["c1", "c2", "c3"] and got.ratings == [["1", "1"], ["2", "3"], [None, "2"]]


@pytest.mark.parametrize("raw,code", [(b"", "empty_file"), (b"  \n ", "empty_file"),
                                      (b"%PDF-1.4\x00\x01binary", "not_a_table"),
                                      (b"a,b\n1,2\n3\n", "ragged_row")])
def test_unreadable_files_name_the_file(raw, code):
    with pytest.raises(InputError) as err:
        read_ratings(raw, "bad.csv")
    assert err.value.code == code and err.value.details["file"] == "bad.csv"


# The one ID rule: a first column is the unit ID of a ratings table exactly when read_responses takes it
# as the respondent ID of the same table.
@pytest.mark.parametrize("name,values", [
    ("respondent", list(range(101, 113))),          # an ID name, numbers
    ("pid", [f"p{i}" for i in range(12)]),          # an ID name, codes
    ("coder_id", [f"x{i}" for i in range(12)]),     # ends in 'id'
    ("code", [f"L{i:02d}" for i in range(12)]),     # no ID name: short distinct codes
    ("seq", list(range(1, 13))),                    # no ID name: numbers the rows
    ("dan", [1, 2, 2, 4, 5, 1, 2, 3, 3, 5, 1, 2]),  # a fourth rater
    ("note", ["fine", "ok then", "fine", "good", "fine", "good", "ok then", "fine", "fine", "good", "ok then",
              "fine"]),                              # repeated words: not IDs
])
def test_ratings_and_responses_share_the_id_rule(name, values):
    raw = table(name, values).encode()
    as_responses = read_responses(raw, "t.csv").id_column == name
    as_ratings = read_ratings(raw, "t.csv").id_column == name
    assert as_ratings == as_responses
    expected = name not in ("dan", "note")
    assert as_ratings is expected


def test_ratings_are_text_for_the_agreement_statistics():
    raw = table("unit", list(range(1, 13))).encode()
    got = read_ratings(raw, "r.csv")
    assert np.array(got.ratings, dtype=float).tolist() == np.array(RATERS, dtype=float).tolist()
