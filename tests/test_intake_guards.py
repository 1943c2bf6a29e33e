"""Files that cost more than they weigh (issue 9, item 2): XLSX grids, zip bombs, wide tables, absurd answers."""
from __future__ import annotations

import contextlib
import dataclasses
import io
import logging
import re
import threading
import tracemalloc
import zipfile

import numpy as np
import pytest

from server.engine import BACKGROUND_BUDGET, background_cost
from server.intake import NO_LIMITS, IntakeLimits, ParsedDataset, read_codebook, read_responses
from server.settings import Settings
from server.stats.errors import InputError

from .xlsx_builders import one_cell_at_the_end, sheet, table, workbook, zip_bomb

MB = 1024 * 1024


def _refused(raw: bytes, name: str, **kw) -> InputError:
    with pytest.raises(InputError) as info:
        read_responses(raw, name, **kw)
    return info.value


def _peak_mb(fn) -> float:
    """Peak of Python (and numpy) allocations while fn runs, in MB."""
    tracemalloc.start()
    with contextlib.suppress(InputError):
        fn()
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    return peak / MB


def _csv(header, rows) -> bytes:
    return ("\n".join(",".join(map(str, r)) for r in [header, *rows]) + "\n").encode()


ROWS = [[(i * (j + 1)) % 5 + 1 for j in range(4)] for i in range(30)]
ITEMS = ["Q1", "Q2", "Q3", "Q4"]


def test_limits_default_to_the_settings_defaults():
    s = Settings()
    assert IntakeLimits() == IntakeLimits.from_settings(s)
    assert IntakeLimits().max_unpacked_bytes == s.max_unpacked_bytes
    lowered = IntakeLimits.from_settings(dataclasses.replace(s, max_items=7, max_xlsx_cells=9))
    assert (lowered.max_items, lowered.max_xlsx_cells) == (7, 9)


# ---------------------------------------------------------------------------------------- XLSX grid size

def test_one_cell_at_the_last_row_and_column_is_refused_by_its_declared_dimension():
    raw = one_cell_at_the_end("A1:XFD1048576")
    assert len(raw) < 5000
    err = _refused(raw, "big.xlsx")
    assert err.status == 413 and err.code == "too_many_cells"
    assert "The sheet 'Sheet1' of 'big.xlsx' declares the dimension A1:XFD1048576" in err.message
    assert "1,048,576 rows x 16,384 columns = 17.2 billion cells" in err.message
    assert "at most 5,000,000 are read (setting max_xlsx_cells)" in err.message
    assert err.details == {"file": "big.xlsx", "sheet": "Sheet1", "rows": 1048576, "columns": 16384,
                           "cells": 1048576 * 16384, "limit": 5_000_000, "dimension": "A1:XFD1048576"}


@pytest.mark.parametrize("dimension", [None, "A1:B2", "A1"])
def test_a_missing_or_lying_dimension_does_not_hide_the_real_extent(dimension):
    raw = one_cell_at_the_end(dimension)
    peak = _peak_mb(lambda: read_responses(raw, "big.xlsx"))
    err = _refused(raw, "big.xlsx")
    assert err.status == 413 and err.code == "too_many_cells"
    assert "has a value in cell XFD1048576, so its table spans A1:XFD1048576" in err.message
    assert err.details["cells"] == 1048576 * 16384 and err.details["sheet"] == "Sheet1"
    assert peak < 20  # the grid would be 17 billion cells; nothing of it is built


def test_the_sheet_is_found_wherever_the_workbook_puts_it_and_named_as_the_workbook_names_it():
    raw = workbook(sheet('<row r="1048576"><c r="XFD1048576"><v>1</v></c></row>'), sheet_part="xl/odd/data.xml",
                   sheet_name="Responses")
    err = _refused(raw, "odd.xlsx")
    assert err.code == "too_many_cells" and err.details["sheet"] == "Responses"


@pytest.mark.parametrize("rows_xml, words", [
    # rows numbered far down, written as openpyxl also accepts them
    ('<row r="1e7"><c r="A10000000"><v>1</v></c></row>', "numbers a row 10,000,000"),
    ('<row r="6000000"/>', "numbers a row 6,000,000"),
    # cells without references: openpyxl counts them along the row
    ('<row r="1">' + "<c><v>1</v></c>" * 16_385 + "</row>", "of more than 16,384 cells"),
    # any child of a row is read as a cell, whatever its tag
    ('<row r="1048576"><x r="XFD1048576"><v>1</v></x></row>', "has a value in cell XFD1048576"),
    # an inline string is a value too
    ('<row r="1048576"><c r="XFD1048576" t="inlineStr"><is><t>x</t></is></c></row>', "cell XFD1048576"),
])
def test_every_way_of_reaching_far_cells_is_caught(rows_xml, words):
    err = _refused(workbook(sheet(rows_xml)), "far.xlsx", limits=IntakeLimits(max_items=None))  # cells only
    assert err.status == 413 and err.code == "too_many_cells" and words in err.message


def test_styled_empty_cells_far_away_do_not_count_as_the_table():
    rows = table(ITEMS, ROWS) + '<row r="40"><c r="XFD40" s="1"/></row>'  # formatting only, no value
    d = read_responses(workbook(sheet(rows)), "styled.xlsx")
    assert d.item_names == ITEMS and d.n_rows == 30


def test_the_cell_limit_is_the_setting():
    raw = workbook(sheet(table(ITEMS, ROWS)))  # 31 rows x 4 columns, no dimension
    assert read_responses(raw, "ok.xlsx").n_rows == 30
    err = _refused(raw, "ok.xlsx", limits=IntakeLimits(max_xlsx_cells=100))
    assert err.code == "too_many_cells" and "spans A1:D" in err.message and "at most 100 are read" in err.message
    assert read_responses(raw, "ok.xlsx", limits=IntakeLimits(max_xlsx_cells=124)).n_rows == 30


def test_a_sheet_wider_than_the_column_cap_is_refused_before_reading():
    raw = workbook(sheet(table(ITEMS, ROWS) + '<row r="31"><c r="XFD31"><v>1</v></c></row>'))
    err = _refused(raw, "wide.xlsx")
    assert err.status == 422 and err.code == "too_many_items"
    assert "'wide.xlsx' has 16,384 columns in sheet 'Sheet1'" in err.message and "column XFD" in err.message


def test_an_ordinary_workbook_with_a_formula_column_still_reads():
    openpyxl = pytest.importorskip("openpyxl")
    wb = openpyxl.Workbook()
    ws = wb.active
    ws.append([*ITEMS, "total"])
    for i, r in enumerate(ROWS, start=2):
        ws.append([*r, f"=SUM(A{i}:D{i})"])
    buf = io.BytesIO()
    wb.save(buf)
    d = read_responses(buf.getvalue(), "formulas.xlsx")
    assert d.item_names == ITEMS and d.n_rows == 30
    np.testing.assert_array_equal(d.responses, np.asarray(ROWS, dtype=float))


# ---------------------------------------------------------------------------------------- zip bombs

def test_a_zip_bomb_is_refused_by_its_unpacked_size():
    raw = zip_bomb(40 * MB)
    assert len(raw) < 200_000
    err = _refused(raw, "bomb.xlsx", limits=IntakeLimits(max_unpacked_bytes=8 * MB))
    assert err.status == 413 and err.code == "too_large_unpacked"
    assert "The workbook 'bomb.xlsx' unpacks to 40.0 MB" in err.message and "'xl/media/zeros.bin'" in err.message
    assert "at most 8.0 MB are read (setting max_unpacked_mb)" in err.message
    assert err.details["unpacked_bytes"] > 40 * MB and err.details["limit_bytes"] == 8 * MB


def test_a_codebook_is_guarded_as_well():
    with pytest.raises(InputError) as info:
        read_codebook(zip_bomb(20 * MB), "cb.xlsx", limits=IntakeLimits(max_unpacked_bytes=4 * MB))
    assert info.value.code == "too_large_unpacked" and info.value.details["file"] == "cb.xlsx"


@pytest.mark.slow
def test_a_two_gigabyte_zip_bomb_is_refused_at_the_default_limit():
    raw = zip_bomb(2048 * MB, chunk=8 * MB)
    assert len(raw) < 5 * MB
    peak = _peak_mb(lambda: read_responses(raw, "bomb.xlsx"))
    err = _refused(raw, "bomb.xlsx")
    assert err.status == 413 and err.code == "too_large_unpacked" and "2,048.0 MB" in err.message
    assert peak < 50


def test_a_zip_of_thousands_of_parts_is_refused_before_its_index_is_read():
    buf = io.BytesIO()
    with zipfile.ZipFile(buf, "w") as zf:
        for i in range(10_001):
            zf.writestr(f"p{i}", b"")
    err = _refused(buf.getvalue(), "parts.xlsx")
    assert err.status == 413 and err.code == "too_large_unpacked" and "10,001" in err.message


def test_a_sheet_nested_absurdly_deep_is_not_read():
    err = _refused(workbook(sheet("<a>" * 200 + "</a>" * 200)), "deep.xlsx")
    assert err.code == "not_a_table" and "nests its XML" in err.message


# ---------------------------------------------------------------------------------------- wide tables

def test_ten_thousand_columns_are_refused_early_and_cheaply():
    rng = np.random.default_rng(9)
    raw = _csv([f"Q{j}" for j in range(10_000)], rng.integers(1, 6, size=(60, 10_000)).tolist())
    err = _refused(raw, "wide.csv")
    assert err.status == 422 and err.code == "too_many_items"
    assert "'wide.csv' has 10,000 columns; at most 1,000 item columns are analysed (setting max_items)" in err.message
    assert err.details["columns"] == 10_000 and err.details["limit"] == 1000
    # refused on the header line, before a frame is built (the old path ended in a ~10 GB analysis)
    assert _peak_mb(lambda: read_responses(raw, "wide.csv")) < 3 * len(raw) / MB + 5


def test_more_item_columns_than_max_items_name_the_count():
    rng = np.random.default_rng(3)
    raw = _csv(["id", *(f"Q{j}" for j in range(1, 13))], [[i, *rng.integers(1, 6, 12)] for i in range(1, 31)])
    err = _refused(raw, "twelve.csv", limits=IntakeLimits(max_items=10))
    assert err.status == 422 and err.code == "too_many_items"
    assert "'twelve.csv' has 12 item columns; at most 10 are analysed (setting max_items)" in err.message
    assert err.details == {"file": "twelve.csv", "items": 12, "limit": 10}
    assert read_responses(raw, "twelve.csv", limits=IntakeLimits(max_items=12)).responses.shape == (30, 12)
    assert read_responses(raw, "twelve.csv", limits=NO_LIMITS).responses.shape == (30, 12)


def test_quoted_column_names_with_commas_are_not_counted_twice():
    header = [f'"Item {j}, agree?"' for j in range(1, 41)]
    rows = [[(i + j) % 5 + 1 for j in range(40)] for i in range(30)]
    d = read_responses(_csv(header, rows), "quoted.csv", limits=IntakeLimits(max_items=40))
    assert len(d.items) == 40


# ---------------------------------------------------------------------------------------- absurd values

def _with_cell(value: str) -> bytes:
    rows = [list(map(str, r)) for r in ROWS]
    rows[2][1] = value  # file row 4, column Q2
    return _csv(ITEMS, rows)


@pytest.mark.parametrize("value, code", [("1e308", "absurd_value"), ("inf", "non_finite_value"),
                                         ("-inf", "non_finite_value"), ("1e400", "non_finite_value"),
                                         ("-1e308", "absurd_value")])
@pytest.mark.parametrize("declared", [True, False])
def test_values_no_scale_can_hold_are_named_errors(value, code, declared):
    kw = {"scale_min": 1, "scale_max": 5} if declared else {}
    err = _refused(_with_cell(value), "scale.csv", **kw)
    assert err.status == 422 and err.code == code
    assert (err.details["column"], err.details["row"], err.details["value"]) == ("Q2", 4, value)
    assert f"column 'Q2', row 4: {value}" in err.message.replace("'" + value + "'", value)


def test_an_undeclared_code_far_from_every_answer_is_an_error_that_suggests_missing_codes():
    err = _refused(_with_cell("9999"), "codes.csv")
    assert err.code == "absurd_value" and "column 'Q2', row 4: 9999" in err.message
    assert "missing codes" in err.message
    d = read_responses(_with_cell("9999"), "codes.csv", missing_codes=[9999])
    assert np.isnan(d.responses[2, 1]) and np.nanmax(d.responses) <= 5


def test_a_value_merely_outside_the_declared_range_is_a_warning_naming_the_cell_and_is_set_to_missing():
    for value in ("99", "9999", "0"):
        d = read_responses(_with_cell(value), "range.csv", scale_min=1, scale_max=5)
        assert np.isnan(d.responses[2, 1]) and np.nanmax(d.responses) <= 5 and np.nanmin(d.responses) >= 1
        note = next(w for w in d.warnings if "outside the item's range" in w)
        assert f"column 'Q2', row 4: {value}" in note and "set to missing" in note


def test_nan_text_is_a_missing_answer():
    d = read_responses(_with_cell("nan"), "nan.csv", scale_min=1, scale_max=5)
    assert np.isnan(d.responses[2, 1]) and d.items[1].n_missing == 1


def test_values_no_scale_can_hold_in_a_workbook_are_named_too():
    rows = re.sub(r'<c r="B4"><v>\d+</v>', '<c r="B4"><v>1E+308</v>', table(ITEMS, ROWS))
    err = _refused(workbook(sheet(rows)), "huge.xlsx", scale_min=1, scale_max=5)
    assert err.code == "absurd_value" and (err.details["column"], err.details["row"]) == ("Q2", 4)
    # 1e400 cannot be stored in a workbook at all (the reader overflows): still a 422 naming the file
    rows = re.sub(r'<c r="B4"><v>\d+</v>', '<c r="B4"><v>1e400</v>', table(ITEMS, ROWS))
    err = _refused(workbook(sheet(rows)), "overflow.xlsx")
    assert err.status == 422 and err.details["file"] == "overflow.xlsx"


# ---------------------------------------------------------------------------------------- background cost

def _parsed(n: int, k: int) -> ParsedDataset:
    from server.intake import ItemMeta

    items = [ItemMeta(name=f"Q{j}", text="", construct=None, reverse=False, min=1, max=5, n_missing=0,
                      range_source="form") for j in range(k)]
    X = np.random.default_rng(1).integers(1, 6, size=(n, k)).astype(float)
    return ParsedDataset(name="x", items=items, responses=X, ids=None, id_column=None, n_rows=n)


def test_background_cost_scales_with_items_and_respondents():
    assert background_cost(500, 20) < background_cost(5000, 20) < background_cost(5000, 200)
    assert background_cost(2000, 100) < BACKGROUND_BUDGET      # an ordinary study starts at once
    assert background_cost(60, 1000) > BACKGROUND_BUDGET       # 1,000 items are left to the page
    assert background_cost(1_000_000, 30) > BACKGROUND_BUDGET  # as are a million respondents


def test_prime_skips_the_background_analysis_when_it_would_cost_too_much(app, caplog, monkeypatch):
    engine = app.state.engine
    started = []
    monkeypatch.setattr(engine, "analyse", lambda dataset_id, request: started.append(dataset_id))
    with caplog.at_level(logging.INFO, logger="scalewright"):
        engine.prime("big", _parsed(60, 1000))
        engine.prime("small", _parsed(60, 10))
    for t in threading.enumerate():
        if t.name.startswith("warm-"):
            t.join(5)
    assert started == ["small"]
    assert any("background analysis of big skipped" in r.getMessage() for r in caplog.records)
