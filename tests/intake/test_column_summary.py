"""The intake's one-pass column summary and its text screen, against numpy's and pandas' own answers."""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from server.intake.text import _could_be_numbers, _may_hold_numbers
from server.intake.values import ColumnSummary, column_stats


@pytest.mark.parametrize("order", ["C", "F"])
@pytest.mark.parametrize("gaps", [0.0, 0.05, 0.6])
def test_column_summary_equals_numpy_nan_reductions(order, gaps):
    rng = np.random.default_rng(11)
    X = rng.integers(1, 8, size=(400, 30)).astype(float)
    X[rng.random(X.shape) < gaps] = np.nan
    X[:, 3] = np.nan  # a column without any value
    X[5, 7] = np.inf   # infinities count as values
    X[9, 8] = -np.inf
    X = np.asarray(X, order=order)
    s = ColumnSummary.of(X)
    with np.errstate(invalid="ignore"), pytest.warns(RuntimeWarning):  # numpy warns of the all-NaN column
        lo, hi = np.nanmin(X, axis=0), np.nanmax(X, axis=0)
    np.testing.assert_array_equal(s.lo, lo)
    np.testing.assert_array_equal(s.hi, hi)
    np.testing.assert_array_equal(s.n_missing, np.isnan(X).sum(axis=0))
    by_column = ColumnSummary.of_columns([column_stats(X[:, j]) for j in range(X.shape[1])])
    np.testing.assert_array_equal(by_column.lo, lo)
    np.testing.assert_array_equal(by_column.hi, hi)
    np.testing.assert_array_equal(by_column.n_missing, s.n_missing)


def test_column_summary_of_no_rows():
    s = ColumnSummary.of(np.empty((0, 4)))
    assert np.isnan(s.lo).all() and np.isnan(s.hi).all() and (s.n_missing == 0).all()


@pytest.mark.parametrize("cells", [
    ["R00017", "R00018", "abc"],           # letters only: nothing to read as a number
    ["R1", "12", "x"],                      # one number among text
    ["inf", "nan", "Rx"],                   # words pandas reads as numbers
    ["  7", "-3", "+.5", "1e3"],
    ["Anna", None, "Bo"],                   # a missing cell
    ["", "Q9"],
])
def test_text_screen_never_rules_out_a_cell_the_finer_screen_keeps(cells):
    part = pd.Series(cells, dtype=object)
    if not _may_hold_numbers(part):
        kept = [c for c in _could_be_numbers(part.dropna()) if c != ""]
        assert kept == []
        assert pd.to_numeric(part.dropna(), errors="coerce").notna().sum() == 0  # pandas' own reading agrees


def test_text_screen_answers_both_ways():
    assert not _may_hold_numbers(pd.Series(["R00017", "R00018", "abc"], dtype=object))
    assert _may_hold_numbers(pd.Series(["R1", "12"], dtype=object))
    assert _may_hold_numbers(pd.Series(["Rx", "inf"], dtype=object))  # pandas reads 'inf' as a number
