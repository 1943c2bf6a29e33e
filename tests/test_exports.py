"""CSV exports: values survive a round trip through pandas; formula-like text is neutralised.

Source for the neutralising rule: OWASP, "CSV Injection" (cells beginning with =, +, -, @, tab or carriage
return). The round trips are checked against pandas.read_csv, an outside reader.
"""
from __future__ import annotations

import io

import numpy as np
import pandas as pd
import pytest

from server.exports import (
    format_number,
    neutralise_cell,
    responses_csv,
    safe_filename,
    scoring_key_csv,
    write_csv,
)


def read(text: str, **kw) -> pd.DataFrame:
    return pd.read_csv(io.StringIO(text), **kw)


@pytest.mark.parametrize("cell", ["=SUM(A1:A3)", "+cmd|' /C calc'!A0", "-2+3", "@SUM(1,2)", "\t=1", "\r=1",
                                  "=HYPERLINK(\"http://x\",\"y\")", "-", "+", "@"])
def test_formula_like_cells_are_prefixed_with_a_quote(cell):
    # OWASP CSV Injection: prefix such cells with a single quote so spreadsheets show them as text.
    assert neutralise_cell(cell) == "'" + cell


@pytest.mark.parametrize("cell", ["-3", "+4", "-0.5", "1e-3", "-2.5E+2", "plain text", "", "a=b", "3-4"])
def test_numbers_and_harmless_text_are_untouched(cell):
    assert neutralise_cell(cell) == cell


def test_format_number_round_trips_floats_exactly():
    rng = np.random.default_rng(1)
    values = np.concatenate([rng.normal(size=50), [0.1, 1 / 3, -2.0, 5.0, 1e-17, 123456789.123]])
    for v in values:
        assert float(format_number(v)) == v
    assert format_number(4.0) == "4"
    assert format_number(float("nan")) == ""


def test_scoring_key_round_trip_and_neutralised_text():
    items = [
        {"name": "Q1", "text": "I feel at home here.", "construct": "belonging", "reverse": False,
         "min": 1.0, "max": 5.0},
        {"name": "Q2", "text": "=cmd|' /C calc'!A0", "construct": "@fit", "reverse": True, "min": 1.0, "max": 7.0},
        {"name": "-Q3", "text": "Text, with a comma and \"quotes\"\nand a new line", "construct": None,
         "reverse": False, "min": 0.0, "max": 4.0},
    ]
    text = scoring_key_csv(items)
    assert text.startswith("\ufeff")
    df = read(text, keep_default_na=False)
    assert list(df.columns) == ["item", "text", "construct", "reverse", "min", "max"]
    assert df["item"].tolist() == ["Q1", "Q2", "'-Q3"]  # OWASP: '-Q3' is not a number, so neutralised
    assert df["text"].tolist() == ["I feel at home here.", "'=cmd|' /C calc'!A0",
                                   "Text, with a comma and \"quotes\"\nand a new line"]
    assert df["construct"].tolist() == ["belonging", "'@fit", ""]
    assert df["reverse"].tolist() == [False, True, False]
    assert df["min"].tolist() == [1, 1, 0]
    assert df["max"].tolist() == [5, 7, 4]


def test_responses_round_trip_with_ids_first_and_missing_cells():
    rng = np.random.default_rng(7)
    matrix = rng.integers(1, 6, size=(12, 3)).astype(float)
    matrix[2, 1] = np.nan
    matrix[5, 0] = 2.5
    ids = [f"r{i:02d}" for i in range(12)]
    ids[3] = "=1+1"
    text = responses_csv(matrix, ["A", "B", "C"], ids=ids, id_column="pid")
    df = read(text, dtype={"pid": str})
    assert list(df.columns) == ["pid", "A", "B", "C"]
    expected_ids = list(ids)
    expected_ids[3] = "'=1+1"
    assert df["pid"].tolist() == expected_ids
    np.testing.assert_array_equal(df[["A", "B", "C"]].to_numpy(dtype=float), matrix)


def test_responses_without_ids_are_numbered_and_negative_values_stay_numbers():
    matrix = np.array([[-1.0, 2.0], [0.25, -3.0], [4.0, np.nan]])
    df = read(responses_csv(matrix, ["x", "y"]))
    assert df.columns[0] == "row"
    assert df["row"].tolist() == [1, 2, 3]
    np.testing.assert_array_equal(df[["x", "y"]].to_numpy(dtype=float), matrix)


def test_responses_shape_mismatch_is_an_error():
    with pytest.raises(ValueError):
        responses_csv(np.zeros((2, 3)), ["a", "b"])
    with pytest.raises(ValueError):
        responses_csv(np.zeros((2, 2)), ["a", "b"], ids=["1"])


def test_header_cells_are_neutralised_too():
    df = read(write_csv(["id", "=danger"], [["1", 2]]))
    assert list(df.columns) == ["id", "'=danger"]


def test_safe_filename():
    assert safe_filename("Belonging v2", "scoring-key", suffix=".csv") == "Belonging_v2-scoring-key.csv"
    assert safe_filename("../../etc/passwd\"; x", suffix=".csv") == "etc_passwd_x.csv"
    assert safe_filename("Zugehörigkeit – März", suffix=".html") == "Zugehorigkeit_Marz.html"
    assert safe_filename("", suffix=".csv") == "scalewright.csv"
