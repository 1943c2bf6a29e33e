"""Delimited text: byte decoding, title lines, delimiter and decimal comma, and the records' row numbers.

Decoding: a UTF-16 byte-order mark is re-encoded to UTF-8; UTF-8 with or without BOM is read as it is;
anything else is read as Latin-1 (ISO-8859-1) with a warning. Delimiter (comma, semicolon, tab,
vertical bar) and decimal comma are detected from the first ``SAMPLE_BYTES``.
"""
from __future__ import annotations

import csv
import io
import re
import warnings as _warnings
from collections.abc import Iterable
from typing import Any, NoReturn

import numpy as np
import pandas as pd

from ..stats.errors import InputError
from .common import (
    DEFAULT_LIMITS,
    EXTRA_NA_VALUES,
    IntakeLimits,
    check_width,
    clean_header,
    first_rows,
    is_number,
    unnamed,
)

CANDIDATE_DELIMITERS = (",", ";", "\t", "|")
DELIMITER_NAMES = {",": "comma", ";": "semicolon", "\t": "tab", "|": "vertical bar"}
SAMPLE_BYTES = 256 * 1024
DECIMAL_COMMA = re.compile(r"^\s*[-+]?\d+,\d+\s*$")
DECIMAL_DOT = re.compile(r"^\s*[-+]?\d+\.\d+\s*$")


def decode_bytes(raw: bytes, filename: str) -> tuple[bytes, str, list[str]]:
    """Return (bytes to parse, pandas encoding name, warnings). UTF-16 is re-encoded to UTF-8."""
    notes: list[str] = []
    if raw[:2] in (b"\xff\xfe", b"\xfe\xff"):
        try:
            raw = raw.decode("utf-16").encode("utf-8")
        except UnicodeDecodeError as exc:
            raise InputError(f"The file '{filename}' starts like UTF-16 text but cannot be decoded: {exc}.",
                             code="bad_encoding", details={"file": filename}) from exc
        return raw, "utf-8", notes
    if raw.isascii():  # ASCII is valid UTF-8: no need to decode a large file to know it
        return raw, "utf-8", notes
    try:
        raw.decode("utf-8")  # validity check only; the text itself is not kept
        return raw, ("utf-8-sig" if raw[:3] == b"\xef\xbb\xbf" else "utf-8"), notes
    except UnicodeDecodeError as exc:
        notes.append(f"The file '{filename}' is not valid UTF-8 (first bad byte at position {exc.start}); "
                     "it was read as Latin-1 (ISO-8859-1), so check that accented letters look right.")
        return raw, "latin-1", notes


def sample_text(raw: bytes, encoding: str) -> tuple[str, bool]:
    """The first SAMPLE_BYTES decoded, cut at the last complete line. Returns (text, whole_file)."""
    whole = len(raw) <= SAMPLE_BYTES
    chunk = raw if whole else raw[:SAMPLE_BYTES]
    if not whole:
        cut = chunk.rfind(b"\n")
        if cut > 0:
            chunk = chunk[:cut]
    return chunk.decode(encoding, errors="replace"), whole


def detect_delimiter(sample: str, filename: str, *, allow_single: bool = False) -> str:
    """Pick the delimiter whose field count is the same on every sampled line (most fields wins)."""
    lines = [ln for ln in sample.splitlines() if ln.strip()][:200]
    best, best_key = None, None
    for order, delim in enumerate(CANDIDATE_DELIMITERS):
        try:
            counts = [len(r) for r in csv.reader(io.StringIO("\n".join(lines), newline=""), delimiter=delim) if r]
        except csv.Error:
            continue
        if not counts:
            continue
        header = counts[0]
        if header < 2:
            continue
        consistency = sum(c == header for c in counts) / len(counts)
        key = (consistency >= 0.999, consistency, header, -order)
        if best_key is None or key > best_key:
            best, best_key = delim, key
    if best is None and allow_single:
        return ","
    if best is None:
        raise InputError(
            f"The file '{filename}' is not a table: its first line has a single column. Expected a header "
            "row of column names and one row per respondent, separated by commas, semicolons or tabs.",
            code="not_a_table", details={"file": filename})
    return best


def mostly_numbers(cells: Iterable[Any]) -> bool:
    """Whether most non-empty cells of a row read as numbers (a row of answers, not of column names)."""
    filled = [str(c).strip() for c in cells if str(c).strip()]
    return bool(filled) and sum(is_number(c.replace(",", ".")) for c in filled) > len(filled) / 2


def blank_title_lines(raw: bytes, sample: str, encoding: str) -> tuple[bytes, str, list[tuple[int, str]]]:
    """Blank the single-cell title lines above a header row ('Belonging pilot, spring 2026').

    A line is a title when it holds at most one non-empty cell, under every candidate delimiter, while a
    later line of the first 30 holds three or more. Blanked lines keep their line ends, so row numbers
    stay those of the file (the parser skips blank lines). Returns (raw, sample, [(row, text)]).
    """
    lines = sample.split("\n")[:30]

    def filled(line: str) -> tuple[int, str]:
        """(most non-empty cells under any delimiter, the text of the line's cells)."""
        best, text, widest = 0, "", 0
        for d in CANDIDATE_DELIMITERS:
            try:
                rec = next(csv.reader([line.lstrip("\ufeff")], delimiter=d), [])
            except csv.Error:
                return 99, ""  # odd quoting: not a plain title, leave the file as it is
            cells = [cell.strip() for cell in rec if cell.strip()]
            best = max(best, len(cells))
            if len(rec) > widest:
                widest, text = len(rec), " ".join(cells)
        return best, text

    def blank(line: str) -> bool:
        return not re.sub(r'[\s,;|"\ufeff]', "", line)

    titles: list[tuple[int, str]] = []
    counts: list[int] = []
    first = None
    for i, ln in enumerate(lines):
        cnt, text = (0, "") if blank(ln) else filled(ln)
        counts.append(cnt)
        if first is not None or cnt == 0:
            continue
        if cnt == 1 and ln.count('"') % 2 == 0:
            titles.append((i + 1, text))
            continue
        first = i
    if not titles or first is None or max(counts[first:]) < 3 or counts[first] < 2:
        return raw, sample, []
    if mostly_numbers(max((next(csv.reader([lines[first]], delimiter=d), []) for d in CANDIDATE_DELIMITERS),
                           key=len)):
        return raw, sample, []  # the line after the single cell holds answers: that cell was the header
    parts = raw.split(b"\n", first)
    raw = b"\n" * first + parts[first]
    sample = "\n" * first + sample.split("\n", first)[first]
    return raw, sample, titles


def detect_decimal_comma(sample: str, delim: str) -> bool:
    if delim == ",":
        return False
    n_comma = n_dot = 0
    for row in csv.reader(io.StringIO(sample, newline=""), delimiter=delim):
        for cell in row:
            if DECIMAL_COMMA.match(cell):
                n_comma += 1
            elif DECIMAL_DOT.match(cell):
                n_dot += 1
    return n_comma > n_dot

def scan_records(raw: bytes, encoding: str, delim: str, filename: str) -> tuple[list[str], np.ndarray]:
    """Check every record has as many fields as the header; return (header, file row number per record).

    Row numbers are 1-based lines of the file (the header is row 1); blank lines are skipped, as the
    parser skips them. One Python step per line, never per cell.
    """
    if b'"' not in raw and len(raw) >= FAST_MIN_BYTES:
        return _scan_unquoted(raw, encoding, delim, filename)
    if b'"' not in raw:
        lines = raw.split(b"\n")
        del raw
        dbyte = delim.encode()
        header_line, _header_no = None, 0
        rows: list[int] = []
        expected = 0
        for no, line in enumerate(lines, start=1):
            if line.endswith(b"\r"):
                line = line[:-1]
            if not line:
                continue
            if header_line is None:
                header_line, _header_no = line, no
                expected = line.count(dbyte) + 1
                continue
            found = line.count(dbyte) + 1
            if found != expected:
                raise_ragged(filename, no, expected, found, delim)
            rows.append(no)
        if header_line is None:
            raise InputError(f"The file '{filename}' is empty.", code="empty_file", details={"file": filename})
        header = next(csv.reader([header_line.decode(encoding, errors="replace")], delimiter=delim))
        return header, np.asarray(rows, dtype=np.int64)
    text = raw.decode(encoding, errors="replace")
    text = text.removeprefix("\ufeff")
    reader = csv.reader(io.StringIO(text, newline=""), delimiter=delim)
    header: list[str] | None = None
    rows = []
    prev_line = 0
    try:
        for rec in reader:
            start = prev_line + 1
            prev_line = reader.line_num
            if not rec:
                continue
            if header is None:
                header = rec
                continue
            if len(rec) != len(header):
                raise_ragged(filename, start, len(header), len(rec), delim)
            rows.append(start)
    except csv.Error as exc:
        raise InputError(f"The file '{filename}' could not be read as a table near row {prev_line + 1}: {exc}.",
                         code="not_a_table", details={"file": filename, "row": prev_line + 1}) from exc
    if header is None:
        raise InputError(f"The file '{filename}' is empty.", code="empty_file", details={"file": filename})
    return header, np.asarray(rows, dtype=np.int64)


def raise_ragged(filename: str, row: int, expected: int, found: int, delim: str) -> NoReturn:
    raise InputError(
        f"Row {row} of '{filename}' has {found} fields but the header has {expected} "
        f"({DELIMITER_NAMES.get(delim, repr(delim))}-separated). Every row must have one value per column "
        "(leave a cell empty for a missing answer).",
        code="ragged_row", details={"file": filename, "row": row, "expected": expected, "found": found,
                                    "delimiter": delim})


def read_delimited(raw: bytes, filename: str, *, as_strings: bool = False, limits: IntakeLimits = DEFAULT_LIMITS
                    ) -> tuple[pd.DataFrame, np.ndarray, list[str], dict]:
    """Read delimited text. Returns (frame, file row numbers, warnings, info)."""
    if raw[:2] not in (b"\xff\xfe", b"\xfe\xff") and b"\x00" in raw[:SAMPLE_BYTES]:  # UTF-16 has NULs
        raise InputError(f"The file '{filename}' is not a table: it contains binary data. Upload a CSV, TSV "
                         "or XLSX file.", code="not_a_table", details={"file": filename})
    raw, encoding, notes = decode_bytes(raw, filename)
    if b"\r" in raw:  # one line end for the scanner and the parser alike: CRLF and lone CR become LF
        raw = raw.replace(b"\r\n", b"\n").replace(b"\r", b"\n")
    sample, _ = sample_text(raw, encoding)
    if not sample.strip().lstrip("\ufeff").strip():
        raise InputError(f"The file '{filename}' is empty.", code="empty_file", details={"file": filename})
    raw, sample, titles = blank_title_lines(raw, sample, encoding)
    if titles:
        shown = "; ".join(f"row {no}: '{text[:60]}'" for no, text in titles[:3])
        notes.append(f"{first_rows(len(titles))} of '{filename}' held a single cell ({shown}); "
                     f"{'it was' if len(titles) == 1 else 'they were'} read as a title, not as the header row.")
    delim = detect_delimiter(sample.lstrip("\ufeff"), filename, allow_single=as_strings)
    decimal_comma = (not as_strings) and detect_decimal_comma(sample, delim)
    check_width(header_width(raw, delim), filename, limits)  # before any structure per cell is built
    header, row_numbers = scan_records(raw, encoding, delim, filename)
    names = clean_header(header, filename)
    opts = {"sep": delim, "header": 0, "names": names, "engine": "c", "skip_blank_lines": True,
            "skipinitialspace": starts_a_field_with_space(raw, delim), "encoding": encoding, "index_col": False}
    if as_strings:
        opts.update(dtype=str, keep_default_na=False)
    else:
        opts.update(na_values=EXTRA_NA_VALUES, decimal="," if decimal_comma else ".")
    try:
        with _warnings.catch_warnings():
            _warnings.simplefilter("ignore")
            fast = None if as_strings else _read_numeric(raw, opts, len(row_numbers))
            df, matrix = (pd.read_csv(io.BytesIO(raw), **opts), None) if fast is None else fast
    except pd.errors.EmptyDataError as exc:
        raise InputError(f"The file '{filename}' is empty.", code="empty_file",
                         details={"file": filename}) from exc
    except (pd.errors.ParserError, ValueError, UnicodeDecodeError) as exc:
        raise InputError(f"The file '{filename}' could not be read as a table: {exc}", code="not_a_table",
                         details={"file": filename}) from exc
    if len(row_numbers) != len(df):  # multi-line cells or odd quoting: fall back to record positions
        row_numbers = np.arange(2, len(df) + 2, dtype=np.int64)
    info = {"format": "delimited", "delimiter": delim, "encoding": encoding, "decimal_comma": decimal_comma,
            "unnamed": [names[j] for j in unnamed(header)]}
    if matrix is not None:
        info["matrix"] = matrix  # the frame's number columns are views of it (see _read_numeric)
    return df, row_numbers, notes, info


def starts_a_field_with_space(raw: bytes, delim: str) -> bool:
    """Whether a space follows a delimiter or a line start (parsing with ``skipinitialspace`` then matters;
    without such a space the option changes nothing and only slows the parser)."""
    first = raw[3:4] if raw.startswith(b"\xef\xbb\xbf") else raw[:1]
    if first == b" ":
        return True
    if b" " not in raw:  # a byte search; most number files have no space at all
        return False
    buf = np.frombuffer(raw, dtype=np.uint8)
    before = buf[np.flatnonzero(buf[1:] == 32)]  # the byte before each space
    return bool(((before == ord(delim)) | (before == 10)).any())


def _scan_unquoted(raw: bytes, encoding: str, delim: str, filename: str, *, block: int = 1 << 18
                   ) -> tuple[list[str], np.ndarray]:
    """:func:`scan_records` of a file without quotes, counted with numpy on blocks of whole lines."""
    buf = np.frombuffer(raw, dtype=np.uint8)
    dbyte = ord(delim)
    header: list[str] | None = None
    expected = 0
    rows: list[np.ndarray] = []
    line_no = 0  # lines before the block
    start = 0
    while start < len(buf):
        stop = raw.find(b"\n", min(start + block, len(buf)) - 1)
        stop = len(buf) if stop < 0 else stop + 1  # the block ends after a line end (or at the end of the file)
        part = buf[start:stop]
        ends = np.flatnonzero(part == 10)
        if not len(ends) or ends[-1] != len(part) - 1:
            ends = np.append(ends, len(part))  # a last line without its line end
        starts = np.concatenate(([0], ends[:-1] + 1))
        cr = np.zeros(len(ends), dtype=bool)
        has = ends > starts
        cr[has] = part[ends[has] - 1] == 13
        length = ends - starts - cr
        # starts rise strictly; a line shorter than 65,536 bytes holds fewer delimiters, so 16 bits count them
        narrow = np.uint16 if (ends - starts).max() < 65536 else np.int64
        counts = np.add.reduceat((part == dbyte).view(np.uint8), starts, dtype=narrow).astype(np.int64)
        numbers = line_no + 1 + np.arange(len(ends))
        keep = length > 0
        if header is None and keep.any():
            h = int(np.flatnonzero(keep)[0])
            line = bytes(part[starts[h]:starts[h] + length[h]])
            header = next(csv.reader([line.decode(encoding, errors="replace")], delimiter=delim))
            expected = line.count(delim.encode()) + 1
            keep[h] = False
        found = counts + 1
        bad = np.flatnonzero(keep & (found != expected))
        if len(bad):
            raise_ragged(filename, int(numbers[bad[0]]), expected, int(found[bad[0]]), delim)
        rows.append(numbers[keep])
        line_no += len(ends)
        start = stop
    if header is None:
        raise InputError(f"The file '{filename}' is empty.", code="empty_file", details={"file": filename})
    return header, (np.concatenate(rows) if rows else np.zeros(0, dtype=np.int64)).astype(np.int64)


FAST_MIN_BYTES = 8 * 1024 * 1024  # smaller files are read in one piece: memory is not a concern there
FAST_SAMPLE_ROWS = 2000
FAST_CHUNK_ROWS = 65536  # at most; fewer for a smaller file, so a chunk stays small beside its matrix
_EXACT = 1e15  # whole numbers below this are exact as float64 and print the same (IDs stay the same text)


def _same_type(parts: list[pd.Series]) -> bool:
    """Whether an ID-like column read in chunks has the type (and cells) the whole-file reading gives it:
    numbers in every chunk, or text in every chunk with no cell that reads as a number (else pandas could
    have read some of its cells as numbers: '007' as 7)."""
    numeric = [pd.api.types.is_numeric_dtype(p.dtype) and not pd.api.types.is_bool_dtype(p.dtype) for p in parts]
    if all(numeric):
        return True
    if any(numeric) or any(pd.api.types.is_bool_dtype(p.dtype) for p in parts):
        return False
    candidates = (pd.Series(_could_be_numbers(p), dtype=object) for p in parts if _may_hold_numbers(p))
    return not any(pd.to_numeric(c, errors="coerce").notna().any() for c in candidates)


_NOT_A_NUMBER_START = np.array(list("abcdefghjklmopqrstuvwxyzABCDEFGHJKLMOPQRSTUVWXYZ"))  # not i/I, n/N (inf, nan)
_A_NUMBER_MAY_START = re.compile(r"\n[^a-hj-mo-zA-HJ-MO-Z\n]")  # a cell (after a line end) not starting as above


def _may_hold_numbers(part: pd.Series) -> bool:
    """False when no filled cell of a text column could read as a number by the screen of
    :func:`_could_be_numbers` (each starts with a letter that begins no number; an empty cell is no number),
    found by one search over the cells joined by line ends; True when some could, or when unsure (a cell
    that is not text, a line end inside a cell only adds candidates)."""
    try:
        text = "\n" + "\n".join(part.tolist())
    except TypeError:  # missing cells (NaN) or cells that are not text
        try:
            text = "\n" + "\n".join(part.dropna().tolist())
        except TypeError:
            return True
    return _A_NUMBER_MAY_START.search(text) is not None


def _could_be_numbers(part: pd.Series) -> np.ndarray:
    """The cells of a text column that could read as numbers: all but those starting with a letter that
    begins no number ('R00017'; 'inf', 'nan' and missing cells are kept), a cheap screen before ``pd.to_numeric``."""
    cells = part.to_numpy(dtype=object)
    return cells[~np.isin(cells.astype("U1"), _NOT_A_NUMBER_START)]


def _read_numeric(raw: bytes, opts: dict[str, Any], n_rows: int) -> tuple[pd.DataFrame, np.ndarray] | None:
    """A large all-number file read in row chunks straight into one float64 matrix, or None to read it whole.

    Taken when the first rows hold only numbers (columns named like an ID keep pandas' own types): the
    frame's number columns are then views of one column-major respondents x columns matrix (returned beside
    it), so the reading holds about one copy of the numbers instead of pandas' three (its chunks,
    their concatenation, the consolidated block). Any surprise further down (a text cell, a row count that
    does not match the scan) gives None, and the file is read whole as before: same frame, same errors.
    """
    if len(raw) < FAST_MIN_BYTES or n_rows <= FAST_SAMPLE_ROWS:
        return None
    try:
        sample = pd.read_csv(io.BytesIO(raw), nrows=FAST_SAMPLE_ROWS, **opts)
    except (pd.errors.ParserError, ValueError, UnicodeDecodeError):
        return None
    names = [str(c) for c in sample.columns]
    if len(set(names)) != len(names):
        return None
    from .columns import named_like_id  # here: columns imports the codebook reader, which imports this module

    keep_types = {c for c in names if named_like_id(c)}
    for c in names:
        if c in keep_types:
            continue
        values = sample[c]
        if values.dtype.kind not in "if" or not bool((values.abs().fillna(0) < _EXACT).all()):
            return None
    numeric = [c for c in names if c not in keep_types]
    if not numeric:
        return None
    matrix = np.empty((n_rows, len(numeric)), dtype=np.float64, order="F")  # columns contiguous, as pandas
    others: dict[str, list[pd.Series]] = {c: [] for c in keep_types}
    start = 0
    try:
        rows = min(FAST_CHUNK_ROWS, max(FAST_CHUNK_ROWS // 4, n_rows // 8))
        # the parser's own types (whole numbers parse faster as integers than as floats); a chunk column of
        # another type (text, true/false) sends the file to the whole reading
        reader = pd.read_csv(io.BytesIO(raw), chunksize=rows, **opts)
        with reader:
            for chunk in reader:
                stop = start + len(chunk)
                if stop > n_rows:
                    return None
                for j, c in enumerate(numeric):  # column by column: no intermediate chunk matrix
                    values = chunk[c].to_numpy()
                    if values.dtype.kind not in "iuf":
                        return None
                    matrix[start:stop, j] = values
                for c in keep_types:
                    others[c].append(chunk[c])
                start = stop
    except (pd.errors.ParserError, ValueError, UnicodeDecodeError, OverflowError):
        return None
    if start != n_rows or not all(_same_type(parts) for parts in others.values()):
        return None
    df = pd.DataFrame(matrix, columns=numeric, copy=False)
    for pos, c in enumerate(names):
        if c in keep_types:
            df.insert(pos, c, pd.concat(others.pop(c), ignore_index=True))
    return df, matrix


def header_width(raw: bytes, delim: str) -> int:
    """Fields in the first non-blank line, counted on the bytes with quoted parts left out (no parsing)."""
    start = re.match(rb"(?:\xef\xbb\xbf)?[\s,;|]*\n", raw)
    start = start.end() if start else 0
    end = raw.find(b"\n", start)
    line = raw[start:] if end < 0 else raw[start:end]
    if b'"' in line:
        line = re.sub(rb'"[^"]*"', b"", line)
    return line.count(delim.encode()) + 1


