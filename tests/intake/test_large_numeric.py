"""A large all-number file read in chunks into one column-major matrix gives what the whole-file reading gives."""
from __future__ import annotations

import io

import numpy as np
import pytest

from server.intake import read_responses, text
from server.stats.errors import InputError


def _csv(n=3000, k=12, *, seed=0, id_col=None, extra=None, delim=",", decimal=".", late_text=False,
         empty_row=True) -> bytes:
    rng = np.random.default_rng(seed)
    X = rng.integers(1, 6, size=(n, k)).astype(float)
    X[rng.random((n, k)) < 0.05] = np.nan
    if empty_row:
        X[7] = np.nan  # a respondent who answered nothing
    X[11, 3] = -9  # a missing code
    X[13, 4] = 8   # outside the range
    head = [f"q{j + 1}" for j in range(k)]
    cols = [[("" if np.isnan(v) else f"{v:g}") for v in X[:, j]] for j in range(k)]
    if decimal == ",":
        cols[0] = [c.replace(".", ",") if c else c for c in cols[0]]
        cols[0][5] = "2,5"
    if late_text:
        cols[2][n - 10] = "agree"
    if id_col == "named":
        head.insert(0, "respondent_id")
        cols.insert(0, [f"R{i:05d}" for i in range(n)])
    elif id_col == "mixed":  # text IDs and a few that read as numbers: pandas' own types decide, as before
        head.insert(0, "respondent_id")
        cols.insert(0, [f"00{i}" if i % 500 == 0 else f"R{i:05d}" for i in range(n)])
    elif id_col == "numbers":
        head.insert(0, "code")
        cols.insert(0, [str(100_000 + 7 * i) for i in range(n)])
    if extra == "total":
        head.append("total")
        cols.append([str(int(np.nansum(X[i]))) for i in range(n)])
    buf = io.StringIO()
    buf.write(delim.join(head) + "\n")
    for row in zip(*cols):
        buf.write(delim.join(row) + "\n")
    return buf.getvalue().encode()


@pytest.fixture
def small_fast(monkeypatch):
    """The chunked reading for small files too, with several chunks."""
    monkeypatch.setattr(text, "FAST_MIN_BYTES", 0)
    monkeypatch.setattr(text, "FAST_SAMPLE_ROWS", 50)
    monkeypatch.setattr(text, "FAST_CHUNK_ROWS", 257)


def _read(raw, **kw):
    try:
        return read_responses(raw, "big.csv", scale_min=1, scale_max=5, missing_codes=[-9], **kw)
    except InputError as exc:
        return exc


def _same(a, b):
    if isinstance(a, InputError) or isinstance(b, InputError):
        assert (type(a), getattr(a, "code", None), str(a)) == (type(b), getattr(b, "code", None), str(b))
        return
    assert np.array_equal(a.responses, b.responses, equal_nan=True)
    assert a.meta() == b.meta()
    assert a.ids == b.ids


CASES = [dict(), dict(id_col="named"), dict(id_col="mixed"), dict(id_col="numbers"), dict(extra="total"),
         dict(delim=";", decimal=","), dict(late_text=True), dict(id_col="named", late_text=True)]


@pytest.mark.parametrize("case", CASES, ids=[str(c) for c in CASES])
def test_chunked_reading_equals_the_whole_file_reading(case, monkeypatch):
    raw = _csv(**case)
    whole = _read(raw)
    monkeypatch.setattr(text, "FAST_MIN_BYTES", 0)
    monkeypatch.setattr(text, "FAST_SAMPLE_ROWS", 50)
    monkeypatch.setattr(text, "FAST_CHUNK_ROWS", 257)
    taken = []
    real = text._read_numeric
    monkeypatch.setattr(text, "_read_numeric", lambda *a: taken.append(r := real(*a)) or r)
    chunked = _read(raw)
    _same(chunked, whole)
    fallback = bool(case.get("late_text")) or case.get("id_col") == "mixed"
    assert taken and (taken[0] is None) == fallback  # the chunked reading was the one tested (or refused)
    if case.get("late_text"):
        assert isinstance(chunked, InputError)


def test_an_all_item_file_keeps_one_column_major_matrix(small_fast):
    d = _read(_csv(id_col="named", empty_row=False))
    assert d.responses.flags.f_contiguous and d.responses.shape == (3000, 12)
    d = _read(_csv())  # a row without answers is dropped: a copy, C-ordered as before
    assert d.responses.flags.c_contiguous and d.responses.shape == (2999, 12)


def test_the_named_id_column_option_is_honoured(small_fast, monkeypatch):
    raw = _csv(id_col="numbers")
    fast = _read(raw, id_column="code")
    monkeypatch.setattr(text, "FAST_MIN_BYTES", 10 ** 12)
    _same(fast, _read(raw, id_column="code"))
    assert fast.ids[:2] == ["100000", "100007"]


def _scan_both(raw: bytes, delim: str = ","):
    out = []
    for fn in (lambda: text._scan_unquoted(raw, "utf-8", delim, "f.csv", block=7),
               lambda: text.scan_records(raw, "utf-8", delim, "f.csv")):  # the small-file path, line by line
        try:
            header, rows = fn()
            out.append((header, rows.tolist()))
        except InputError as exc:
            out.append((exc.code, str(exc), exc.details))
    return out


@pytest.mark.parametrize("raw", [
    b"a,b,c\n1,2,3\n4,5,6\n", b"\n\na,b,c\r\n1,2,3\r\n\r\n\n4,5,6", b"a,b\n1,2\n1,2,3\n1\n", b"a;b\n1;2\n\n",
    b"a,b,c\n" + b"1,2,3\n" * 40 + b"\n" + b"7,8,9\n" * 3, b"\n\n\n", b"x\n1\n\n2\n", b"a,b\n1,2\n3",
])
def test_the_numpy_scan_equals_the_line_by_line_scan(raw):
    delim = ";" if b";" in raw else ","
    fast, slow = _scan_both(raw, delim)
    assert fast == slow


def test_the_numpy_scan_equals_the_line_by_line_scan_on_random_files():
    rng = np.random.default_rng(3)
    for _ in range(200):
        lines = []
        for _ in range(rng.integers(0, 12)):
            r = rng.random()
            fields = 3 if r < 0.8 else int(rng.integers(1, 5))
            line = "" if r > 0.93 else ",".join(str(int(v)) for v in rng.integers(0, 9, fields))
            lines.append(line + ("\r" if rng.random() < 0.1 else ""))
        raw = "\n".join(lines).encode() + (b"\n" if rng.random() < 0.5 else b"")
        fast, slow = _scan_both(raw)
        assert fast == slow, raw


_PEAK_CHILD = r"""
import json, sys
import server
from server.intake import read_responses

def hwm():
    for line in open("/proc/self/status"):
        if line.startswith("VmHWM:"):
            return int(line.split()[1]) * 1024

before = hwm()
raw = open(sys.argv[1], "rb").read()
d = read_responses(raw, "big.csv", scale_min=1, scale_max=5)
print(json.dumps({"growth": hwm() - before, "matrix": d.responses.nbytes, "shape": list(d.responses.shape)}))
"""


@pytest.mark.slow
def test_a_large_intake_peaks_below_twice_its_matrix(tmp_path):
    """VmHWM growth from before the file's bytes are read, the bytes included: at most 2x the float64 matrix."""
    import json
    import subprocess
    import sys
    from pathlib import Path

    n, k = 300_000, 60
    rng = np.random.default_rng(0)
    path = tmp_path / "big.csv"
    with open(path, "wb") as fh:
        fh.write((",".join(f"q{j + 1}" for j in range(k)) + "\n").encode())
        for _ in range(0, n, 50_000):
            block = np.full((50_000, 2 * k), ord(","), dtype=np.uint8)
            block[:, 0::2] = rng.integers(1, 6, size=(50_000, k), dtype=np.uint8) + ord("0")
            block[:, -1] = ord("\n")
            fh.write(block.tobytes())
    root = Path(__file__).resolve().parents[2]
    out = subprocess.run([sys.executable, "-c", _PEAK_CHILD, str(path)], cwd=root, capture_output=True, text=True,
                         timeout=600, check=True)
    got = json.loads(out.stdout.strip().splitlines()[-1])
    assert got["shape"] == [n, k]
    assert got["growth"] <= 2 * got["matrix"], got
