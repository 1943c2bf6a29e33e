"""Shortcuts of the intake give what the long way gives: pandas' parser options, chunk types, ID screens."""
from __future__ import annotations

import io

import numpy as np
import pandas as pd
import pytest

from server.intake import read_responses, text
from server.intake.text import _could_be_numbers, _same_type, starts_a_field_with_space
from server.stats.errors import InputError


@pytest.mark.parametrize("raw,expected", [
    (b"a,b\n1,2\n", False), (b"a, b\n1,2\n", True), (b" a,b\n1,2\n", True), (b"\xef\xbb\xbf a,b\n1,2\n", True),
    (b"a,b\n 1,2\n", True), (b"a b,c\n1,2\n", False), (b"a;b\n1; 2\n", True), (b"a,b\n1,2 \n", False),
])
def test_a_space_that_starts_a_field_is_found(raw, expected):
    delim = ";" if b";" in raw else ","
    assert starts_a_field_with_space(raw, delim) is expected


@pytest.mark.parametrize("raw", [b"id,a,b\nr1,1,2\nr2,3,4\nr3,5,1\n", b"id,a,b\nr1, 1,2\nr2,3, NA\nr3, 5,1\n",
                                 b"id, a,b\n r1,1,2\nr2 ,3,4\nr3,5, .\n"])
def test_parsing_without_skipinitialspace_only_when_it_changes_nothing(raw):
    """pandas.read_csv with skipinitialspace=True is the reference: the frame read is the same."""
    df, _, _, _ = text.read_delimited(raw, "f.csv")
    names = [c.strip() for c in raw.split(b"\n")[0].decode().split(",")]
    ref = pd.read_csv(io.BytesIO(raw), skipinitialspace=True, header=0, names=names, na_values=[".", "#NULL!"])
    pd.testing.assert_frame_equal(df, ref, check_dtype=False)


def _rows(n: int, late: str) -> bytes:
    rng = np.random.default_rng(1)
    lines = ["respondent_id,q1,q2,q3"]
    for i in range(n):
        a, b, c = (int(v) for v in rng.integers(1, 6, 3))
        lines.append(f"R{i:05d},{a},{b},{late if i == n - 5 else c}")
    return ("\n".join(lines) + "\n").encode()


@pytest.mark.parametrize("late", ["2.5", "", "True", "agree", "9"])
def test_chunks_of_whole_numbers_then_of_decimals_read_as_the_whole_file(late, monkeypatch):
    raw = _rows(3000, late)

    def read():
        try:
            return read_responses(raw, "f.csv", scale_min=1, scale_max=5)
        except InputError as exc:
            return exc

    whole = read()
    monkeypatch.setattr(text, "FAST_MIN_BYTES", 0)
    monkeypatch.setattr(text, "FAST_SAMPLE_ROWS", 50)
    monkeypatch.setattr(text, "FAST_CHUNK_ROWS", 257)
    taken = []
    real = text._read_numeric
    monkeypatch.setattr(text, "_read_numeric", lambda *a: taken.append(r := real(*a)) or r)
    chunked = read()
    assert taken and (taken[0] is None) == (late in ("True", "agree"))  # text in a chunk: the whole reading
    if isinstance(whole, InputError):
        assert isinstance(chunked, InputError) and (chunked.code, str(chunked)) == (whole.code, str(whole))
        return
    assert np.array_equal(chunked.responses, whole.responses, equal_nan=True)
    assert chunked.meta() == whole.meta() and chunked.ids == whole.ids


def test_the_id_screen_keeps_every_cell_that_could_read_as_a_number():
    cells = pd.Series(["R01", " 5", "inf", "x", None, np.nan, "007", "nan", "-1", ".5", "e5", "１２"], dtype=object)
    kept = list(_could_be_numbers(cells))
    # pandas.to_numeric is the reference: every cell it reads as a number is kept by the screen
    numbers = cells[pd.to_numeric(cells, errors="coerce").notna()].tolist()
    assert all(any(v is k for k in kept) for v in numbers) and "R01" not in kept and "x" not in kept
    assert _same_type([pd.Series(["R1", "R2"]), pd.Series(["R3", "R4"])])
    assert not _same_type([pd.Series(["R1", "R2"]), pd.Series(["R3", "007"])])
    assert not _same_type([pd.Series(["R1", "R2"]), pd.Series(["R3", "inf"])])


def test_ids_are_stripped_and_a_missing_id_is_empty():
    raw = b"respondent_id,q1,q2\nR1 ,1,2\n,3,4\nR3,5,1\nR4,2,2\n"
    d = read_responses(raw, "f.csv", scale_min=1, scale_max=5)
    assert d.ids == ["R1", "", "R3", "R4"]
