"""Column roles: each a named rule, applied in the documented order (server/intake/columns.py)."""
from __future__ import annotations

import re

import numpy as np
import pandas as pd

from server.intake import columns as roles_module
from server.intake.codebook import Codebook, CodebookEntry, match_codebook
from server.intake.columns import COLUMN_RULES, VALUE_RULES, Column, classify_columns, first_column_is_id


def classify(frame: pd.DataFrame, codebook: list[str] | None = None, id_column: str | None = None):
    cb = None if codebook is None else Codebook({n: CodebookEntry(n, "", None, False, None, None) for n in codebook})
    matched = match_codebook([str(c) for c in frame.columns], cb)
    return classify_columns(frame, codebook=cb, matched=matched, id_column=id_column, unnamed=set(),
                            formula_columns=set())


def test_every_rule_is_documented_and_listed_in_order():
    listed = re.findall(r"^\d+\.\s+``(\w+)``", roles_module.__doc__, flags=re.M)
    assert listed == [r.__name__ for r in (*COLUMN_RULES, *VALUE_RULES)]
    assert all(r.__doc__ and r.__doc__.strip() for r in (*COLUMN_RULES, *VALUE_RULES))


def test_roles_of_a_typical_export():
    n = 12
    rng = np.random.default_rng(4)
    frame = pd.DataFrame({
        "row": np.arange(1, n + 1),                      # numbers the rows -> the ID (no other ID)
        "Q1": rng.integers(1, 6, n), "Q2": rng.integers(1, 6, n),
        "age": rng.integers(18, 70, n),                  # demographic name
        "BEL_total": rng.integers(5, 25, n),             # score name
        "mood": ["Agree", "Disagree", "Neutral"] * 4,    # answer labels
        "remark": [f"free text number {i}" for i in range(n)],
        "blank": [np.nan] * n,
    })
    got = classify(frame)
    assert got.items == ["Q1", "Q2"] and got.id_column == "row"
    assert dict(got.left_out) == {
        "age": "demographic or survey-metadata name", "BEL_total": "named like a total or mean score, not an item",
        "mood": "answer labels such as 'Agree', 'Disagree', 'Neutral', not numbers", "remark": "text",
        "blank": "empty"}


def test_the_first_id_named_column_wins_and_later_ones_are_left_out():
    frame = pd.DataFrame({"Q1": [1, 2, 3], "pid": ["a", "b", "c"], "user_id": [7, 8, 9], "Q2": [3, 2, 1]})
    got = classify(frame)
    assert got.id_column == "pid" and got.left_out == [("user_id", "ID-like name")]
    assert classify(frame, id_column="user_id").left_out == [("pid", "ID-like name")]


def test_codebook_keeps_columns_named_like_its_items_only():
    frame = pd.DataFrame({"Q1": [1, 2, 3], "Q2": [2, 3, 4], "Q21": [1, 1, 2], "visits": [3, 9, 1]})
    got = classify(frame, codebook=["Q1", "Q2"])
    assert got.items == ["Q1", "Q2", "Q21"] and got.left_out == [("visits", "not in the codebook")]


def test_text_cells_in_an_item_column_are_kept_for_the_error():
    frame = pd.DataFrame({"Q1": ["1", "2", "x", "4"], "Q2": [1, 2, 3, 4]})
    got = classify(frame)
    assert got.items == ["Q1", "Q2"] and got.not_numbers["Q1"].tolist() == [2]
    assert np.isnan(got.values["Q1"][2]) and got.values["Q1"][3] == 4


def test_distinct_codes_above_100_are_ids_not_answers():
    n = 12
    frame = pd.DataFrame({"Q1": [1, 2] * 6, "Q2": [2, 3] * 6, "code": np.arange(5000, 5000 + 7 * n, 7)})
    got = classify(frame)
    assert got.items == ["Q1", "Q2"] and got.id_column == "code"


def test_first_column_rule_of_a_ratings_table():
    assert first_column_is_id("Unit", pd.Series(["1", "1", "2"]), unnamed=False)       # a unit name
    assert first_column_is_id("x", pd.Series(["1", "1", "2"]), unnamed=True)           # no name at all
    assert first_column_is_id("log", pd.Series(["L1", "L2", "L3"]), unnamed=False)     # short distinct codes
    assert not first_column_is_id("r1", pd.Series(["L1", "", "L3"]), unnamed=False)    # an empty cell
    assert not first_column_is_id("r1", pd.Series(["1", "2", "3"]), unnamed=False)     # three numbers are ratings
    assert first_column_is_id("n", pd.Series([str(i) for i in range(1, 11)]), unnamed=False)  # numbers the rows


def test_a_column_is_judged_once():
    col = Column("Q1", pd.Series(["1", "2,5", "x", None]))
    assert col.numbers.tolist()[:2] == [1.0, 2.5] and col.not_numbers.tolist() == [2]
    assert col.share_numbers == 2 / 3
