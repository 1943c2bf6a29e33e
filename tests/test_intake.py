"""Intake: reading response files and codebooks into a validated matrix (server/intake.py)."""
from __future__ import annotations

import io
from pathlib import Path

import numpy as np
import openpyxl
import pandas as pd
import pingouin
import pytest
import semopy
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from server.intake import read_codebook, read_responses
from server.stats.errors import InputError

REF = Path(__file__).parent / "reference" / "intake"
HS39 = Path(semopy.__file__).parent / "examples" / "holzinger_swineford39_data.csv"
CRONBACH_MISSING = Path(pingouin.__file__).parent / "datasets" / "cronbach_wide_missing.csv"

SIMPLE = b"Q1,Q2,Q3\n1,2,3\n2,3,4\n3,4,5\n4,5,1\n"


def _err(raw, filename="f.csv", **kw) -> InputError:
    with pytest.raises(InputError) as info:
        read_responses(raw, filename, **kw)
    assert 400 <= info.value.status < 500
    return info.value


def _xlsx(rows) -> bytes:
    wb = openpyxl.Workbook()
    ws = wb.active
    for r in rows:
        ws.append(r)
    buf = io.BytesIO()
    wb.save(buf)
    return buf.getvalue()


# ---- files shipped by reference packages, compared with pandas reading the same file


def test_holzinger_swineford_matches_pandas():
    raw = HS39.read_bytes()
    d = read_responses(raw, HS39.name)
    ref = pd.read_csv(HS39)  # pandas on semopy's shipped file
    items = [f"x{i}" for i in range(1, 10)]
    assert d.item_names == items
    np.testing.assert_array_equal(d.responses, ref[items].to_numpy(dtype=float))
    assert d.n_rows == 301  # Holzinger & Swineford (1939) Grant-White + Pasteur sample, as semopy ships it
    assert d.id_column == "id"
    assert d.ids == [str(v) for v in ref["id"]]
    left = next(w for w in d.warnings if "left out" in w)
    for col in ("sex", "ageyr", "agemo", "school", "grade", "column 1"):
        assert f"'{col}'" in left
    assert all(it.range_source == "observed" for it in d.items)
    assert d.items[0].min == ref["x1"].min() and d.items[0].max == ref["x1"].max()


def test_bom_file_from_pingouin_matches_pandas():
    raw = CRONBACH_MISSING.read_bytes()
    assert raw.startswith(b"\xef\xbb\xbf")
    d = read_responses(raw, CRONBACH_MISSING.name)
    ref = pd.read_csv(CRONBACH_MISSING, encoding="utf-8-sig")  # pandas on pingouin's shipped file
    assert d.item_names == list(ref.columns) and d.item_names[0] == "Q1"
    np.testing.assert_array_equal(d.responses, ref.to_numpy(dtype=float))
    assert [it.n_missing for it in d.items] == ref.isna().sum().tolist()
    assert not any("Latin-1" in w for w in d.warnings)


# ---- encodings, delimiters, decimal comma, XLSX


def test_latin1_semicolon_decimal_comma_fixture():
    raw = (REF / "pilot_semicolon_latin1.csv").read_bytes()
    d = read_responses(raw, "pilot_semicolon_latin1.csv", missing_codes=[-9])
    assert any("Latin-1" in w for w in d.warnings)
    assert d.item_names == ["F1", "F2", "F3", "F4"]
    assert d.id_column == "id" and d.ids == ["101", "102", "103", "104", "106"]
    np.testing.assert_array_equal(d.responses[:, 1], [3.5, 2.0, 4.5, 3.0, 1.5])
    assert np.isnan(d.responses[1, 2])  # -9 is a missing code
    left = next(w for w in d.warnings if "left out" in w)
    assert "'Datum' (dates)" in left and "'Kommentar' (text)" in left
    dropped = next(w for w in d.warnings if "dropped" in w)
    assert "1 row" in dropped and "file rows 6" in dropped
    assert any("Missing codes -9 marked 1 cell" in w for w in d.warnings)


def test_utf8_without_bom_and_with_bom_read_alike():
    text = "Q1,Q2,Frage_ä\n1,2,3\n2,3,4\n3,4,5\n"
    a = read_responses(text.encode("utf-8"), "a.csv")
    b = read_responses(b"\xef\xbb\xbf" + text.encode("utf-8"), "b.csv")
    assert a.item_names == b.item_names == ["Q1", "Q2", "Frage_ä"]
    np.testing.assert_array_equal(a.responses, b.responses)
    assert not a.warnings[:-1]  # only the observed-range note
    assert not any("Latin-1" in w for w in a.warnings + b.warnings)


def test_tsv_and_pipe():
    tsv = b"Q1\tQ2\tQ3\n1\t2\t3\n2\t3\t4\n3\t4\t5\n"
    d = read_responses(tsv, "f.tsv")
    np.testing.assert_array_equal(d.responses, [[1, 2, 3], [2, 3, 4], [3, 4, 5]])
    d = read_responses(tsv.replace(b"\t", b"|"), "f.txt")
    assert d.item_names == ["Q1", "Q2", "Q3"]


def test_semicolon_with_decimal_comma_inline():
    d = read_responses(b"a;b;c\n1,5;2;3\n2;3,25;4\n3;4;5\n", "s.csv")
    np.testing.assert_array_equal(d.responses, [[1.5, 2, 3], [2, 3.25, 4], [3, 4, 5]])


def test_quoted_fields_and_crlf():
    raw = b'id,Q1,Q2,note\r\n"a",1,2,"hello, world"\r\n"b",2,3,"x"\r\n"c",3,4,"y, z"\r\n'
    d = read_responses(raw, "q.csv")
    assert d.item_names == ["Q1", "Q2"] and d.ids == ["a", "b", "c"]


def test_xlsx_with_dates_and_text():
    import datetime as dt

    raw = _xlsx([["respondent", "when", "Q1", "Q2", "Q3"],
                 ["r1", dt.date(2024, 1, 2), 1, 2, 3],
                 ["r2", dt.date(2024, 1, 3), 2, 3, 4],
                 [None, None, None, None, None],
                 ["r3", dt.date(2024, 1, 4), 3, None, 5],
                 ["r4", dt.date(2024, 1, 5), 4, "n/a?", 5]])
    err = _err(raw, "pool.xlsx")
    assert err.code == "non_numeric"
    assert err.details == {**err.details, "column": "Q2", "row": 6, "value": "n/a?"}  # Excel row 6
    raw = _xlsx([["respondent", "when", "Q1", "Q2", "Q3"],
                 ["r1", dt.date(2024, 1, 2), 1, 2, 3],
                 ["r2", dt.date(2024, 1, 3), 2, 3, 4],
                 ["r3", dt.date(2024, 1, 4), 3, None, 5]])
    d = read_responses(raw, "pool.xlsx")
    assert d.item_names == ["Q1", "Q2", "Q3"] and d.id_column == "respondent"
    assert d.ids == ["r1", "r2", "r3"]
    np.testing.assert_array_equal(d.responses[:, 0], [1, 2, 3])
    assert d.items[1].n_missing == 1
    assert any("'when' (dates)" in w for w in d.warnings)


def test_xlsx_recognised_by_content_not_name():
    raw = _xlsx([["Q1", "Q2"], [1, 2], [2, 3], [3, 5]])
    d = read_responses(raw, "upload.bin")
    assert d.item_names == ["Q1", "Q2"] and d.n_rows == 3


# ---- ID column


def test_id_detected_by_name_and_explicit():
    raw = b"Q1,Q2,Q3,PersonCode\n1,2,3,a\n2,3,4,b\n3,4,5,c\n"
    d = read_responses(raw, "f.csv")
    assert d.id_column == "PersonCode" and d.ids == ["a", "b", "c"]  # unique text column
    d = read_responses(b"Resp_ID,Q1,Q2\n7,1,2\n8,2,3\n9,3,5\n", "f.csv")
    assert d.id_column == "Resp_ID" and d.ids == ["7", "8", "9"] and d.item_names == ["Q1", "Q2"]
    d = read_responses(b"Q1,Q2,Q3\n1,2,3\n2,3,4\n3,4,5\n", "f.csv", id_column="Q1")
    assert d.id_column == "Q1" and d.item_names == ["Q2", "Q3"] and d.ids == ["1", "2", "3"]
    assert not any("respondent ID" in w for w in d.warnings)  # explicit: nothing to warn about


def test_unknown_id_column_is_an_error():
    err = _err(SIMPLE, id_column="nope")
    assert err.code == "unknown_column" and err.details["column"] == "nope"
    assert "nope" in err.message and "'Q1'" in err.message


# ---- missing codes, ranges, warnings


def test_missing_codes_and_out_of_range_and_range_sources():
    raw = b"Q1,Q2,Q3\n1,2,99\n2,-9,4\n3,4,5\n7,5,1\n"
    d = read_responses(raw, "f.csv", missing_codes=[-9, 99], scale_min=1, scale_max=5)
    assert np.isnan(d.responses[0, 2]) and np.isnan(d.responses[1, 1])
    assert np.isnan(d.responses[3, 0])  # 7 is outside 1-5
    assert [it.n_missing for it in d.items] == [1, 1, 1]
    assert [it.range_source for it in d.items] == ["form"] * 3
    assert any("Missing codes -9, 99 marked 2 cells" in w for w in d.warnings)
    assert any("1 value outside" in w and "'Q1' 1 (range 1-5)" in w for w in d.warnings)
    d = read_responses(raw, "f.csv")
    assert [it.range_source for it in d.items] == ["observed"] * 3
    assert (d.items[2].min, d.items[2].max) == (1.0, 99.0)


def test_constant_item_and_all_missing_rows_are_warnings():
    raw = b"Q1,Q2,Q3\n4,2,1\n,,\n4,3,2\n4,5,3\n,,\n"
    d = read_responses(raw, "f.csv")
    assert d.n_rows == 3
    assert any("Item 'Q1' is constant (every answer is 4)" in w for w in d.warnings)
    assert any("2 rows with no item answers were dropped (file rows 3, 6)" in w for w in d.warnings)


def test_bad_form_range():
    assert _err(SIMPLE, scale_min=5, scale_max=1).code == "bad_range"
    assert _err(SIMPLE, scale_min=1).code == "bad_range"


# ---- codebook


def test_codebook_text_construct_reverse_ranges_and_mismatches():
    raw = (REF / "pilot_semicolon_latin1.csv").read_bytes()
    d = read_responses(raw, "pilot.csv", codebook_raw=(REF / "pilot_codebook.csv").read_bytes(),
                       codebook_filename="pilot_codebook.csv", missing_codes=[-9], scale_min=1, scale_max=6)
    by = {it.name: it for it in d.items}
    assert by["F4"].text == "I can ask anyone for help, even on a bad day"
    assert [by[n].reverse for n in ("F1", "F2", "F3", "F4")] == [False, False, True, True]
    assert by["F1"].construct == "belonging" and by["F4"].construct == "support"
    assert by["F1"].range_source == "codebook" and (by["F1"].min, by["F1"].max) == (1.0, 5.0)
    assert by["F4"].range_source == "form" and by["F4"].max == 6.0
    assert any("1 codebook item is not in the file: 'F9'" in w for w in d.warnings)


def test_file_items_missing_from_codebook_warn():
    cb = b"item,text,construct,reverse\nQ1,first,a,1\nq2,second,a,0\n"  # q2 matches Q2 ignoring case
    d = read_responses(SIMPLE, "f.csv", codebook_raw=cb, codebook_filename="cb.csv")
    assert d.items[1].text == "second"
    assert any("1 item in the file is not in the codebook" in w and "'Q3'" in w for w in d.warnings)


def test_codebook_reverse_spellings_and_xlsx():
    raw = _xlsx([["Item", "Text", "Construct", "Reverse", "Min", "Max"],
                 ["a", "x", "c", 1, 1, 5], ["b", "y", "c", "TRUE", None, None], ["c", "z", None, "n", 0, 4],
                 ["d", "w", "c", True, None, None], ["e", "v", "c", 0, None, None]])
    cb = read_codebook(raw, "cb.xlsx")
    assert [cb.entries[k].reverse for k in "abcde"] == [True, True, False, True, False]
    assert cb.entries["c"].construct is None and cb.entries["c"].min == 0.0 and cb.entries["a"].max == 5.0


@pytest.mark.parametrize("cb, code_word", [
    (b"name_of_thing,text\nQ1,x\n", "no 'item' column"),
    (b"item,reverse\nQ1,maybe\n", "'maybe'"),
    (b"item,min,max\nQ1,1,\n", "only one of min and max"),
    (b"item,min,max\nQ1,5,1\n", "min must be below max"),
    (b"item,min,max\nQ1,one,5\n", "'one'"),
    (b"item\nQ1\nQ1\n", "twice"),
])
def test_bad_codebooks(cb, code_word):
    err = _err(SIMPLE, codebook_raw=cb, codebook_filename="cb.csv")
    assert err.code == "bad_codebook" and code_word in err.message
    assert err.details["file"] == "cb.csv"


def test_codebook_row_numbers():
    err = _err(SIMPLE, codebook_raw=b"item,reverse\nQ1,1\nQ2,perhaps\n", codebook_filename="cb.csv")
    assert err.details["row"] == 3 and err.details["value"] == "perhaps" and err.details["column"] == "reverse"


# ---- bad input: each with its code and the file/column/row/value


def test_empty_file():
    for raw in (b"", b"   \n\n", b"\xef\xbb\xbf"):
        err = _err(raw, "e.csv")
        assert err.code == "empty_file" and err.details["file"] == "e.csv"


def test_not_a_table():
    assert _err(b"just one column\nof words\nhere\n").code == "not_a_table"
    assert _err(b"%PDF-1.4\x00\x01\x02binary").code == "not_a_table"
    assert _err(b"PK\x03\x04 not really a zip", "x.xlsx").code == "not_a_table"


def test_duplicate_columns():
    err = _err(b"Q1,Q2,Q1\n1,2,3\n2,3,4\n3,4,5\n")
    assert err.code == "duplicate_columns" and err.details["column"] == "Q1"
    assert err.details["positions"] == [1, 3]


def test_fewer_than_two_items():
    err = _err(b"id,Q1,comment\n1,2,a\n2,3,b\n3,4,c\n")
    assert err.code == "too_few_items" and err.details["items"] == ["Q1"]


def test_fewer_than_three_respondents():
    err = _err(b"Q1,Q2\n1,2\n2,3\n,\n")
    assert err.code == "too_few_respondents" and err.details["n_rows"] == 2


def test_non_numeric_cells_name_column_row_value():
    raw = b"Q1,Q2,Q3\n1,2,3\n2,x,4\n3,4,5\n4,5,??\n5,1,2\n"
    err = _err(raw)
    assert err.code == "non_numeric"
    assert (err.details["column"], err.details["row"], err.details["value"]) == ("Q2", 3, "x")
    assert {"column": "Q3", "row": 5, "value": "??"} in err.details["cells"]
    assert "row 3: 'x'" in err.message


def test_ragged_row_names_the_row():
    err = _err(b"Q1,Q2,Q3\n1,2,3\n\n2,3,4,5\n3,4,5\n")  # blank line 3 counts as a file row
    assert err.code == "ragged_row" and err.details["row"] == 4
    assert (err.details["expected"], err.details["found"]) == (3, 4)
    err = _err(b'Q1,Q2,"Q3"\n1,2,3\n2,3\n3,4,5\n')  # short row, quoted path
    assert err.code == "ragged_row" and err.details["row"] == 3


def test_responses_are_raw_not_reverse_scored():
    cb = b"item,reverse,min,max\nQ1,R,1,5\nQ2,0,1,5\nQ3,0,1,5\n"
    d = read_responses(SIMPLE, "f.csv", codebook_raw=cb, codebook_filename="cb.csv")
    assert d.items[0].reverse is True
    np.testing.assert_array_equal(d.responses[:, 0], [1, 2, 3, 4])
    assert d.responses.dtype == np.float64 and d.responses.shape == (4, 3)
    assert d.meta()["items"][0] == d.items[0].to_dict()


def test_quoted_decimal_comma_in_a_comma_file():
    d = read_responses(b'Q1,Q2,Q3\n1,"2,5",3\n2,3,4\n3,4,5\n', "x.csv")
    np.testing.assert_array_equal(d.responses[:, 1], [2.5, 3, 4])


def test_numeric_header_is_a_warning_and_blank_id_column_means_none():
    d = read_responses(b"1,2,3\n1,2,3\n2,3,4\n3,4,5\n", "x.csv", id_column="  ")
    assert d.id_column is None and d.n_rows == 3
    assert any("first row was read as column names" in w for w in d.warnings)


def test_multiline_quoted_cell_keeps_row_numbers():
    raw = b'Q1,Q2,note\n1,2,"two\nlines"\n2,x,"y"\n3,4,z\n'
    err = _err(raw)
    assert (err.details["column"], err.details["row"], err.details["value"]) == ("Q2", 4, "x")


def test_with_a_codebook_unlisted_columns_named_unlike_items_are_left_out():
    raw = b"Q1,Q2,Q3,visits_per_month,score\n1,2,3,4,9\n2,3,4,1,12\n3,4,5,2,10\n"
    cb = b"item,text,construct,reverse\nQ1,a,x,0\nQ2,b,x,0\n"
    d = read_responses(raw, "f.csv", codebook_raw=cb, codebook_filename="cb.csv")
    assert d.item_names == ["Q1", "Q2", "Q3"]  # Q3 is named like the codebook's items: kept, with a warning
    assert any("not in the codebook" in w and "'Q3'" in w for w in d.warnings)
    left = next(w for w in d.warnings if "left out" in w)
    assert "'visits_per_month' (not in the codebook)" in left and "'score' (named like a total" in left
    # Without a codebook the numeric columns are items, except one named like a total score (it would
    # inflate every coefficient if entered as an item).
    plain = read_responses(raw, "f.csv")
    assert plain.item_names == ["Q1", "Q2", "Q3", "visits_per_month"]
    assert any("'score' (named like a total or mean score" in w for w in plain.warnings)


# ---- property: whatever the delimiter, decimal mark, line ends and encoding, the numbers come back


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(data=st.data(), n=st.integers(3, 12), k=st.integers(2, 6),
       delim=st.sampled_from([",", ";", "\t", "|"]), crlf=st.booleans(), bom=st.booleans(),
       halves=st.booleans())
def test_round_trip_through_text(data, n, k, delim, crlf, bom, halves):
    cells = data.draw(st.lists(st.lists(st.one_of(st.none(), st.integers(1, 7)), min_size=k, max_size=k),
                               min_size=n, max_size=n))
    expected = np.array([[np.nan if v is None else v + (0.5 if halves else 0.0) for v in row] for row in cells])
    keep = ~np.isnan(expected).all(axis=1)
    if keep.sum() < 3 or np.isnan(expected[keep]).all(axis=0).any():
        return  # too few answered rows or an empty column: other tests cover those errors
    comma_decimal = halves and delim != ","

    def fmt(v):
        if np.isnan(v):
            return ""
        text = f"{v:g}"
        return text.replace(".", ",") if comma_decimal else text
    eol = "\r\n" if crlf else "\n"
    lines = [delim.join(f"item{j + 1}" for j in range(k))]
    lines += [delim.join(fmt(v) for v in row) for row in expected]
    raw = (("\ufeff" if bom else "") + eol.join(lines) + eol).encode("utf-8")
    d = read_responses(raw, "prop.csv")
    assert d.item_names == [f"item{j + 1}" for j in range(k)]
    np.testing.assert_array_equal(d.responses, expected[keep])
    assert d.n_rows == int(keep.sum())
    assert [it.n_missing for it in d.items] == np.isnan(expected[keep]).sum(axis=0).tolist()


def test_infinite_values_are_errors():
    err = _err(b"Q1,Q2\n1,2\n2,3\n3,-inf\n4,3\n5,4\n")
    assert err.code == "non_finite_value" and (err.details["column"], err.details["row"]) == ("Q2", 4)
    assert err.details["value"] == "-inf"


@settings(max_examples=150, deadline=None)
@given(blob=st.binary(max_size=300), name=st.sampled_from(["f.csv", "f.xlsx", "f.tsv"]))
def test_any_bytes_give_a_dataset_or_an_input_error(blob, name):
    try:
        d = read_responses(blob, name)
    except InputError as exc:
        assert 400 <= exc.status < 500 and exc.details.get("file") == name
    else:
        assert d.responses.shape == (d.n_rows, len(d.items)) and d.n_rows >= 3 and len(d.items) >= 2


@settings(max_examples=150, deadline=None)
@given(data=st.data())
def test_mangled_csv_gives_a_dataset_or_an_input_error(data):
    text = "id,Q1,Q2,Q3,note\n1,1,2,3,a\n2,2,3,4,b\n3,4,5,5,c\n4,5,4,2,d\n"
    alphabet = st.sampled_from(list(',;\t|"\n\r x-9.5é\x00') + ["\ufeff", "NA", ",,"])
    for _ in range(data.draw(st.integers(1, 6))):
        i = data.draw(st.integers(0, len(text)))
        j = data.draw(st.integers(i, min(len(text), i + 4)))
        text = text[:i] + data.draw(alphabet) + text[j:]
    encoding = data.draw(st.sampled_from(["utf-8", "latin-1", "utf-16"]))
    raw = text.encode(encoding, errors="replace")
    try:
        read_responses(raw, "m.csv", missing_codes=[-9])
    except InputError as exc:
        assert 400 <= exc.status < 500 and exc.details.get("file") == "m.csv"


def test_unique_comments_are_not_taken_for_ids():
    raw = b"Q1,Q2,remark\n1,2,liked the tea a lot\n2,3,too noisy on fridays\n3,4,more evening sessions please\n"
    d = read_responses(raw, "f.csv")
    assert d.id_column is None and d.ids is None
    assert any("'remark' (text)" in w for w in d.warnings)
