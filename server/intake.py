"""Reading a response file (CSV, TSV, other delimited text, XLSX) and its codebook into a validated matrix.

The one public entry point is :func:`read_responses`.  It returns a :class:`ParsedDataset`: the RAW
responses (not reverse-scored) as an ``n_rows x k`` float64 array with NaN for missing, one
:class:`ItemMeta` per item, the respondent IDs when an ID column exists, and a list of warnings written
as sentences.  Anything that makes the file unusable raises :class:`server.stats.errors.InputError`
naming the file, column, row (1-based as in the file, the header being row 1) and value.

Pure computation: pandas, numpy and the standard library; no FastAPI here.
"""
from __future__ import annotations

import csv
import io
import posixpath
import pyexpat
import re
import warnings as _warnings
import xml.etree.ElementTree as ET
import zipfile
from dataclasses import asdict, dataclass, field
from pathlib import PurePath

import numpy as np
import pandas as pd

from .stats.errors import InputError

__all__ = ["NO_LIMITS", "Codebook", "CodebookEntry", "IntakeLimits", "ItemMeta", "ParsedDataset", "read_codebook",
           "read_responses"]

CANDIDATE_DELIMITERS = (",", ";", "\t", "|")
DELIMITER_NAMES = {",": "comma", ";": "semicolon", "\t": "tab", "|": "vertical bar"}
SAMPLE_BYTES = 256 * 1024
MAX_LISTED = 5  # how many bad cells / names an error or warning lists before "and N more"
# SAS / SPSS exports write "." for system-missing; SPSS writes "#NULL!" for it when saving to Excel.
EXTRA_NA_VALUES = [".", "#NULL!"]

# Column names (lower case, letters and digits only) that identify respondents rather than items.
ID_NAMES = {
    "id", "ids", "respondent", "respondentid", "respondentno", "respondentnumber", "participant",
    "participantid", "participantno", "subject", "subjectid", "subj", "case", "caseid", "caseno",
    "casenumber", "record", "recordid", "responseid", "response", "userid", "user", "pid", "sid", "uid",
    "personid", "idno", "idnumber", "resp", "respid", "rid",
}
# Column names that are demographics or survey metadata, never items.
NON_ITEM_NAMES = {
    "age", "ageyears", "ageyr", "ageyrs", "agemo", "agemonths", "agey", "agem", "dob", "dateofbirth", "gender", "sex", "education", "edu", "income", "country", "nationality", "ethnicity",
    "race", "language", "occupation", "job", "year", "birthyear", "yearofbirth", "date", "time", "timestamp",
    "datetime", "startdate", "enddate", "starttime", "endtime", "submitdate", "submitted", "recordeddate",
    "duration", "durationinseconds", "durationseconds", "seconds", "minutes", "progress", "finished",
    "status", "ipaddress", "ip", "latitude", "longitude", "lat", "lon", "locationlatitude",
    "locationlongitude", "email", "name", "firstname", "lastname", "comment", "comments", "notes", "note",
    "remarks", "feedback", "group", "condition", "cond", "site", "wave", "cohort", "weight", "zip",
    "zipcode", "postcode", "postalcode", "region", "state", "city", "school", "class", "grade",
    "maritalstatus", "children", "employment", "distributionchannel", "userlanguage", "consent",
}
# Scores computed from the items: entered as an item they would inflate every coefficient.
SCORE_NAMES = {"total", "totalscore", "sum", "sumscore", "score", "scalescore", "mean", "meanscore", "average",
               "avg", "scoretotal", "totalsum"}

_DECIMAL_COMMA = re.compile(r"^\s*[-+]?\d+,\d+\s*$")
_DECIMAL_DOT = re.compile(r"^\s*[-+]?\d+\.\d+\s*$")


@dataclass
class ItemMeta:
    """One item (a column of responses) and what is known about it.

    ``range_source`` says where ``min`` and ``max`` come from: ``"codebook"``, ``"form"`` (the
    ``scale_min``/``scale_max`` fields) or ``"observed"`` (the smallest and largest answers given).
    """

    name: str
    text: str
    construct: str | None
    reverse: bool
    min: float
    max: float
    n_missing: int
    range_source: str

    def to_dict(self) -> dict:
        return asdict(self)


@dataclass
class ParsedDataset:
    """A response file read into a matrix: rows are respondents, columns are items.

    ``responses`` holds RAW values (reverse-keyed items are NOT reverse-scored), NaN = missing.
    ``ids`` are the respondent IDs (as text) when an ID column was used, else ``None``.
    """

    name: str
    items: list[ItemMeta]
    responses: np.ndarray
    ids: list[str] | None
    id_column: str | None
    n_rows: int
    warnings: list[str] = field(default_factory=list)

    @property
    def item_names(self) -> list[str]:
        return [it.name for it in self.items]

    def meta(self) -> dict:
        """Everything except the response matrix, as plain JSON-ready values."""
        return {"name": self.name, "n_rows": self.n_rows, "items": [it.to_dict() for it in self.items],
                "warnings": list(self.warnings), "id_column": self.id_column}


@dataclass(frozen=True)
class CodebookEntry:
    item: str
    text: str
    construct: str | None
    reverse: bool
    min: float | None
    max: float | None


@dataclass(frozen=True)
class Codebook:
    entries: dict[str, CodebookEntry]
    warnings: tuple[str, ...] = ()


@dataclass(frozen=True)
class IntakeLimits:
    """How much a file may cost to read; the defaults are those of ``server.settings.Settings``.

    ``None`` turns a limit off. Files wider than :attr:`max_columns` are refused before they are parsed;
    item columns beyond ``max_items`` after the columns are classified.
    """

    max_items: int | None = 1000
    max_xlsx_cells: int | None = 5_000_000
    max_unpacked_bytes: int | None = 1024 * 1024 * 1024

    @classmethod
    def from_settings(cls, settings) -> IntakeLimits:
        return cls(max_items=settings.max_items, max_xlsx_cells=settings.max_xlsx_cells,
                   max_unpacked_bytes=settings.max_unpacked_bytes)

    @property
    def max_columns(self) -> int | None:
        """Columns a table may have at all: 3 x max_items + 100, room for IDs, demographics and metadata."""
        return None if self.max_items is None else 3 * self.max_items + 100


# The engine re-reads datasets that were accepted at upload: a limit lowered later must not lock them out.
NO_LIMITS = IntakeLimits(max_items=None, max_xlsx_cells=None, max_unpacked_bytes=None)
MAX_XLSX_PARTS = 10_000  # a workbook is a few dozen zip members; a zip of more is not read (its index alone is big)
MAX_XML_DEPTH = 64       # sheet XML nests about six deep (worksheet/sheetData/row/c/is/r/t)
# Absurd answers (common practice: a screening rule in the spirit of Tukey's far-out fences, widened so
# that only typos, overflows and undeclared codes are caught): beyond ABSURD_ABS in absolute value (or
# ABSURD_SPREADS x the largest declared bound, when that is larger); for an item without a declared range,
# also farther than ABSURD_SPREADS x max(P95 - P5, 1) from the item's median.
ABSURD_ABS = 1e6
ABSURD_SPREADS = 100


# --------------------------------------------------------------------------------------------------------
# small helpers


def _norm(name: str) -> str:
    return re.sub(r"[^0-9a-z]", "", str(name).lower())


def _quote_list(names, limit: int = MAX_LISTED) -> str:
    names = list(names)
    shown = ", ".join(f"'{n}'" for n in names[:limit])
    if len(names) > limit:
        shown += f" and {len(names) - limit} more"
    return shown


def _fmt_num(x: float) -> str:
    x = float(x)
    return str(int(x)) if x.is_integer() else f"{x:g}"  # is_integer() is False for inf and nan


def _plural(n: int, one: str, many: str | None = None) -> str:
    return f"{n} {one if n == 1 else (many or one + 's')}"


def _first_rows(n: int) -> str:
    return "The first row" if n == 1 else f"The first {n} rows"


def _is_xlsx(raw: bytes, filename: str) -> bool:
    return raw[:4] == b"PK\x03\x04" or PurePath(filename or "").suffix.lower() in (".xlsx", ".xlsm")


def _decode_bytes(raw: bytes, filename: str) -> tuple[bytes, str, list[str]]:
    """Return (bytes to parse, pandas encoding name, warnings). UTF-16 is re-encoded to UTF-8."""
    notes: list[str] = []
    if raw[:2] in (b"\xff\xfe", b"\xfe\xff"):
        try:
            raw = raw.decode("utf-16").encode("utf-8")
        except UnicodeDecodeError as exc:
            raise InputError(f"The file '{filename}' starts like UTF-16 text but cannot be decoded: {exc}.",
                             code="bad_encoding", details={"file": filename}) from exc
        return raw, "utf-8", notes
    try:
        raw.decode("utf-8")  # validity check only; the text itself is not kept
        return raw, ("utf-8-sig" if raw[:3] == b"\xef\xbb\xbf" else "utf-8"), notes
    except UnicodeDecodeError as exc:
        notes.append(f"The file '{filename}' is not valid UTF-8 (first bad byte at position {exc.start}); "
                     "it was read as Latin-1 (ISO-8859-1), so check that accented letters look right.")
        return raw, "latin-1", notes


def _sample_text(raw: bytes, encoding: str) -> tuple[str, bool]:
    """The first SAMPLE_BYTES decoded, cut at the last complete line. Returns (text, whole_file)."""
    whole = len(raw) <= SAMPLE_BYTES
    chunk = raw if whole else raw[:SAMPLE_BYTES]
    if not whole:
        cut = chunk.rfind(b"\n")
        if cut > 0:
            chunk = chunk[:cut]
    return chunk.decode(encoding, errors="replace"), whole


def _detect_delimiter(sample: str, filename: str, *, allow_single: bool = False) -> str:
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


def _mostly_numbers(cells) -> bool:
    """Whether most non-empty cells of a row read as numbers (a row of answers, not of column names)."""
    filled = [str(c).strip() for c in cells if str(c).strip()]
    return bool(filled) and sum(is_number(c.replace(",", ".")) for c in filled) > len(filled) / 2


def _blank_title_lines(raw: bytes, sample: str, encoding: str) -> tuple[bytes, str, list[tuple[int, str]]]:
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
    if _mostly_numbers(max((next(csv.reader([lines[first]], delimiter=d), []) for d in CANDIDATE_DELIMITERS),
                           key=len)):
        return raw, sample, []  # the line after the single cell holds answers: that cell was the header
    parts = raw.split(b"\n", first)
    raw = b"\n" * first + parts[first]
    sample = "\n" * first + sample.split("\n", first)[first]
    return raw, sample, titles


def _detect_decimal_comma(sample: str, delim: str) -> bool:
    if delim == ",":
        return False
    n_comma = n_dot = 0
    for row in csv.reader(io.StringIO(sample, newline=""), delimiter=delim):
        for cell in row:
            if _DECIMAL_COMMA.match(cell):
                n_comma += 1
            elif _DECIMAL_DOT.match(cell):
                n_dot += 1
    return n_comma > n_dot


def _scan_records(raw: bytes, encoding: str, delim: str, filename: str) -> tuple[list[str], np.ndarray]:
    """Check every record has as many fields as the header; return (header, file row number per record).

    Row numbers are 1-based lines of the file (the header is row 1); blank lines are skipped, as the
    parser skips them. One Python step per line, never per cell.
    """
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
                _raise_ragged(filename, no, expected, found, delim)
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
                _raise_ragged(filename, start, len(header), len(rec), delim)
            rows.append(start)
    except csv.Error as exc:
        raise InputError(f"The file '{filename}' could not be read as a table near row {prev_line + 1}: {exc}.",
                         code="not_a_table", details={"file": filename, "row": prev_line + 1}) from exc
    if header is None:
        raise InputError(f"The file '{filename}' is empty.", code="empty_file", details={"file": filename})
    return header, np.asarray(rows, dtype=np.int64)


def _raise_ragged(filename: str, row: int, expected: int, found: int, delim: str):
    raise InputError(
        f"Row {row} of '{filename}' has {found} fields but the header has {expected} "
        f"({DELIMITER_NAMES.get(delim, repr(delim))}-separated). Every row must have one value per column "
        "(leave a cell empty for a missing answer).",
        code="ragged_row", details={"file": filename, "row": row, "expected": expected, "found": found,
                                    "delimiter": delim})


def _unnamed(header: list) -> list[int]:
    return [j for j, h in enumerate(header)
            if h is None or (isinstance(h, float) and np.isnan(h)) or not str(h).strip().lstrip("\ufeff").strip()]


def _clean_header(header: list, filename: str) -> list[str]:
    names = []
    for j, h in enumerate(header):
        h = "" if h is None or (isinstance(h, float) and np.isnan(h)) else str(h).strip()
        if h.startswith("\ufeff"):
            h = h[1:].strip()
        names.append(h)
    seen: dict[str, int] = {}
    for j, h in enumerate(names):
        if not h:
            continue
        if h in seen:
            raise InputError(
                f"The file '{filename}' has the column name '{h}' twice (columns {seen[h] + 1} and {j + 1}). "
                "Column names must be unique.",
                code="duplicate_columns",
                details={"file": filename, "column": h, "positions": [seen[h] + 1, j + 1]})
        seen[h] = j
    # Unnamed columns get a positional name that cannot clash with a real one.
    out = []
    for j, h in enumerate(names):
        if not h:
            h = f"column {j + 1}"
            while h in seen:
                h += "_"
        out.append(h)
    return out


def _read_delimited(raw: bytes, filename: str, *, as_strings: bool = False, limits: IntakeLimits = IntakeLimits()
                    ) -> tuple[pd.DataFrame, np.ndarray, list[str], dict]:
    """Read delimited text. Returns (frame, file row numbers, warnings, info)."""
    if raw[:2] not in (b"\xff\xfe", b"\xfe\xff") and b"\x00" in raw[:SAMPLE_BYTES]:  # UTF-16 has NULs
        raise InputError(f"The file '{filename}' is not a table: it contains binary data. Upload a CSV, TSV "
                         "or XLSX file.", code="not_a_table", details={"file": filename})
    raw, encoding, notes = _decode_bytes(raw, filename)
    if b"\r" in raw:  # one line end for the scanner and the parser alike: CRLF and lone CR become LF
        raw = raw.replace(b"\r\n", b"\n").replace(b"\r", b"\n")
    sample, _ = _sample_text(raw, encoding)
    if not sample.strip().lstrip("\ufeff").strip():
        raise InputError(f"The file '{filename}' is empty.", code="empty_file", details={"file": filename})
    raw, sample, titles = _blank_title_lines(raw, sample, encoding)
    if titles:
        shown = "; ".join(f"row {no}: '{text[:60]}'" for no, text in titles[:3])
        notes.append(f"{_first_rows(len(titles))} of '{filename}' held a single cell ({shown}); "
                     f"{'it was' if len(titles) == 1 else 'they were'} read as a title, not as the header row.")
    delim = _detect_delimiter(sample.lstrip("\ufeff"), filename, allow_single=as_strings)
    decimal_comma = (not as_strings) and _detect_decimal_comma(sample, delim)
    _check_width(_header_width(raw, delim), filename, limits)  # before any structure per cell is built
    header, row_numbers = _scan_records(raw, encoding, delim, filename)
    names = _clean_header(header, filename)
    opts = {"sep": delim, "header": 0, "names": names, "engine": "c", "skip_blank_lines": True,
                "skipinitialspace": True, "encoding": encoding, "index_col": False}
    if as_strings:
        opts.update(dtype=str, keep_default_na=False)
    else:
        opts.update(na_values=EXTRA_NA_VALUES, decimal="," if decimal_comma else ".")
    try:
        with _warnings.catch_warnings():
            _warnings.simplefilter("ignore")
            df = pd.read_csv(io.BytesIO(raw), **opts)
    except pd.errors.EmptyDataError as exc:
        raise InputError(f"The file '{filename}' is empty.", code="empty_file",
                         details={"file": filename}) from exc
    except (pd.errors.ParserError, ValueError, UnicodeDecodeError) as exc:
        raise InputError(f"The file '{filename}' could not be read as a table: {exc}", code="not_a_table",
                         details={"file": filename}) from exc
    if len(row_numbers) != len(df):  # multi-line cells or odd quoting: fall back to record positions
        row_numbers = np.arange(2, len(df) + 2, dtype=np.int64)
    info = {"format": "delimited", "delimiter": delim, "encoding": encoding, "decimal_comma": decimal_comma,
            "unnamed": [names[j] for j in _unnamed(header)]}
    return df, row_numbers, notes, info


def _header_width(raw: bytes, delim: str) -> int:
    """Fields in the first non-blank line, counted on the bytes with quoted parts left out (no parsing)."""
    start = re.match(rb"(?:\xef\xbb\xbf)?[\s,;|]*\n", raw)
    start = start.end() if start else 0
    end = raw.find(b"\n", start)
    line = raw[start:] if end < 0 else raw[start:end]
    if b'"' in line:
        line = re.sub(rb'"[^"]*"', b"", line)
    return line.count(delim.encode()) + 1


def _check_width(n_columns: int, filename: str, limits: IntakeLimits, where: str = "") -> None:
    """Refuse a table too wide to hold at most ``max_items`` items, before it is parsed."""
    cap = limits.max_columns
    if cap is None or n_columns <= cap:
        return
    raise InputError(
        f"'{filename}' has {n_columns:,} columns{where}; at most {limits.max_items:,} item columns are analysed "
        f"(setting max_items), and a table of more than {cap:,} columns is not read. Upload the items of one "
        "scale (or a few) at a time, or start the server with a higher --max-items.",
        code="too_many_items",
        details={"file": filename, "columns": n_columns, "limit": limits.max_items, "max_columns": cap})


def _count_words(n: float) -> str:
    """12,345 / 4.2 million / 17.2 billion."""
    if n >= 1e9:
        return f"{n / 1e9:.1f} billion"
    if n >= 1e7:
        return f"{n / 1e6:.1f} million"
    return f"{int(n):,}"


def _mb(n: int) -> str:
    return f"{n / 1024 / 1024:,.1f} MB"


def _col_number(letters: str) -> int:
    n = 0
    for ch in letters.upper():
        n = n * 26 + ord(ch) - 64
    return n


def _col_letters(n: int) -> str:
    out = ""
    while n > 0:
        n, r = divmod(n - 1, 26)
        out = chr(65 + r) + out
    return out or "A"


_CELL_REF = re.compile(r"^\$?([A-Za-z]{1,7})\$?(\d{1,15})$")


def _local(tag) -> str:
    return tag.rpartition("}")[2] if isinstance(tag, str) else ""


def _xml_events(fh, where: str, filename: str):
    """(event, element) of an XML stream in constant memory: an element's children are dropped as they end.

    An element's attributes are read at its start; after a child ends the parent is cleared.
    """
    stack: list = []
    try:
        for event, el in ET.iterparse(fh, events=("start", "end")):
            if event == "start":
                stack.append(el)
                if len(stack) > MAX_XML_DEPTH:
                    raise InputError(f"{where} of '{filename}' nests its XML more than {MAX_XML_DEPTH} levels "
                                     "deep; it is not a worksheet a spreadsheet program writes.",
                                     code="not_a_table", details={"file": filename})
                yield event, el
            else:
                yield event, el
                stack.pop()
                if stack:
                    stack[-1].clear()
    except ET.ParseError as exc:
        raise InputError(f"{where} of '{filename}' is not well-formed XML ({exc}); open and save the workbook "
                         "in a spreadsheet program.", code="not_a_table", details={"file": filename}) from None


def _root_tag(zf: zipfile.ZipFile, info: zipfile.ZipInfo) -> str:
    """The local name of a zip member's XML root element ('' when it is not XML)."""
    try:
        with zf.open(info) as fh:
            parser = ET.XMLPullParser(events=("start",))
            for _ in range(16):  # a prolog longer than 64 KB is not a workbook part
                chunk = fh.read(4096)
                if not chunk:
                    break
                parser.feed(chunk)
                for _, el in parser.read_events():
                    return _local(el.tag)
    except Exception:  # noqa: BLE001  (binary parts, encrypted members: not a sheet)
        return ""
    return ""


def _sheet_names(zf: zipfile.ZipFile, filename: str) -> dict[str, str]:
    """Worksheet part -> sheet name, from xl/workbook.xml and xl/_rels/workbook.xml.rels (best effort)."""
    try:
        by_rid: dict[str, str] = {}
        with zf.open("xl/workbook.xml") as fh:
            for event, el in _xml_events(fh, "The workbook part", filename):
                if event == "start" and _local(el.tag) == "sheet":
                    rid = next((v for k, v in el.attrib.items() if _local(k) == "id"), None)
                    if rid is not None:
                        by_rid[rid] = el.get("name", "")
        out = {}
        with zf.open("xl/_rels/workbook.xml.rels") as fh:
            for event, el in _xml_events(fh, "The workbook relationships", filename):
                if event == "start" and _local(el.tag) == "Relationship" and el.get("Id") in by_rid:
                    target = el.get("Target", "")
                    part = target.lstrip("/") if target.startswith("/") else posixpath.normpath("xl/" + target)
                    out[part] = by_rid[el.get("Id")]
        return out
    except Exception:  # noqa: BLE001  (names only make the messages nicer)
        return {}


def _xlsx_guard(raw: bytes, filename: str, limits: IntakeLimits) -> None:
    """Size up an XLSX before any reader builds a grid from it; raise 413 when it would cost too much.

    Checks, in order: the number of zip members; the sum of the members' declared uncompressed sizes
    against ``max_unpacked_bytes`` (Python's zipfile, which openpyxl reads through, never inflates a
    member past its declared size, so the declared sizes bound the work); then each worksheet part
    (every member whose XML root is ``worksheet``, wherever it lies), streamed in constant memory:
    its declared ``<dimension>``, the rows it numbers, the count of its cells, and the extent of the
    cells that hold a value (the grid pandas builds, whatever the dimension says) against
    ``max_xlsx_cells``, and that extent's columns against the column cap of ``max_items``.
    """
    if limits == NO_LIMITS:
        return
    tail = raw[-(0xFFFF + 22):]
    eocd = tail.rfind(b"PK\x05\x06")
    if eocd >= 0 and len(tail) - eocd >= 22:
        parts = int.from_bytes(tail[eocd + 10:eocd + 12], "little")  # 0xFFFF: a zip64 count, even more
        if parts > MAX_XLSX_PARTS:
            raise InputError(
                f"'{filename}' is a zip of {parts:,} or more parts; a workbook has a few dozen, and at most "
                f"{MAX_XLSX_PARTS:,} are read.", code="too_large_unpacked", status=413,
                details={"file": filename, "parts": parts, "limit": MAX_XLSX_PARTS})
    try:
        zf = zipfile.ZipFile(io.BytesIO(raw))
    except Exception:  # noqa: BLE001  (not a zip: the reader says what is wrong with it)
        return
    with zf:
        infos = zf.infolist()
        total = sum(i.file_size for i in infos)
        cap = limits.max_unpacked_bytes
        if cap is not None and total > cap:
            big = max(infos, key=lambda i: i.file_size)
            raise InputError(
                f"The workbook '{filename}' unpacks to {_mb(total)} ({_mb(len(raw))} packed; its largest part, "
                f"'{big.filename}', alone to {_mb(big.file_size)}); at most {_mb(cap)} are read (setting "
                "max_unpacked_mb). A workbook this much larger inside than outside is most likely a zip bomb; "
                "if it is real data, save it as CSV.", code="too_large_unpacked", status=413,
                details={"file": filename, "unpacked_bytes": total, "limit_bytes": cap, "part": big.filename})
        names = None
        for info in infos:
            if info.is_dir() or _root_tag(zf, info) != "worksheet":
                continue
            if names is None:
                names = _sheet_names(zf, filename)
            _check_sheet(zf, info, names.get(info.filename, info.filename), filename, limits)


def _row_number(text: str, previous: int) -> int:
    """A <row r="..."> as openpyxl reads it (a whole number, also written as '1e6'), else the next row."""
    try:
        return int(text)
    except ValueError:
        try:
            val = float(text)
        except ValueError:
            return previous + 1
        return int(val) if np.isfinite(val) and val.is_integer() else previous + 1


def _check_sheet(zf: zipfile.ZipFile, info: zipfile.ZipInfo, sheet: str, filename: str,
                 limits: IntakeLimits) -> None:
    """Stream one worksheet part and refuse it (413) as soon as reading it would cost more than allowed.

    Follows openpyxl's reading: a row's number is its ``r`` (else the previous one plus 1), every child of
    a row is a cell, a cell's column is its reference's (else the previous one plus 1); each row is
    padded to its last cell, and the grid pandas builds spans the last row and column holding a value
    (a cell with a ``<v>`` or inline ``<t>``). Expat callbacks, one per tag, in constant memory.
    """
    cap = limits.max_xlsx_cells
    where = f"The sheet '{sheet}'"

    def refuse(what: str, rows: int, cols: int, **extra):
        cells = rows * max(cols, 1)
        raise InputError(
            f"{where} of '{filename}' {what} ({rows:,} rows x {cols:,} columns = {_count_words(cells)} cells); "
            f"at most {cap:,} are read (setting max_xlsx_cells). Copy the table into a new workbook (or delete "
            "the cells far below or to the right of it), save it as CSV, or start the server with a higher "
            "--max-xlsx-cells.", code="too_many_cells", status=413,
            details={"file": filename, "sheet": sheet, "rows": rows, "columns": cols, "cells": cells,
                     "limit": cap, **extra})

    depth = row_depth = row = col = width = cells = visited = grid_rows = grid_cols = 0
    valued = False
    columns: dict[str, int] = {}  # cell reference -> column, per distinct letters (a sheet has few)

    def start(name, attrs):
        nonlocal depth, row_depth, row, col, width, cells, valued
        depth += 1
        if row_depth:
            if depth == row_depth + 1:  # a cell
                ref = attrs.get("r")
                letters = ref.rstrip("0123456789$").lstrip("$") if ref else ""
                if letters:
                    col = columns.get(letters) or columns.setdefault(letters, _col_number(letters))
                else:
                    col += 1
                width = max(width, col)
                cells += 1
                valued = False
                if cells > 16_384 and cap is not None:  # Excel's last column is XFD = 16,384
                    refuse(f"has a row ({row:,}) of more than 16,384 cells", row, cells)
            elif depth > row_depth + 1 and name[-1] in "vt" and name.rpartition(":")[2] in ("v", "t"):
                valued = True
            return
        if depth > MAX_XML_DEPTH:
            raise InputError(f"{where} of '{filename}' nests its XML more than {MAX_XML_DEPTH} levels deep; it is "
                             "not a worksheet a spreadsheet program writes.", code="not_a_table",
                             details={"file": filename})
        local = name.rpartition(":")[2]
        if local == "row":
            row_depth = depth
            r = attrs.get("r")
            row = row + 1 if r is None else _row_number(r.strip(), row)
            col = width = cells = 0
            if cap is not None and row > cap:  # every row up to this one is read, even empty ones
                refuse(f"numbers a row {row:,}", row, max(grid_cols, 1))
        elif local == "dimension" and cap is not None:
            ref = str(attrs.get("ref") or "").strip()
            m = _CELL_REF.match(ref.split(":")[-1].strip())
            if m and int(m.group(2)) * _col_number(m.group(1)) > cap:
                refuse(f"declares the dimension {ref}", int(m.group(2)), _col_number(m.group(1)), dimension=ref)

    def end(name):
        nonlocal depth, row_depth, visited, grid_rows, grid_cols
        ended = depth
        depth -= 1
        if not row_depth or ended > row_depth + 1:
            return
        if ended == row_depth + 1:  # a cell ended
            if valued and (row > grid_rows or col > grid_cols):
                grid_rows, grid_cols = max(grid_rows, row), max(grid_cols, col)
                if cap is not None and grid_rows * grid_cols > cap:
                    ref = f"A1:{_col_letters(grid_cols)}{grid_rows}"
                    refuse(f"has a value in cell {_col_letters(col)}{row}, so its table spans {ref}", grid_rows,
                           grid_cols, dimension=ref)
                if limits.max_columns is not None and grid_cols > limits.max_columns:
                    _check_width(grid_cols, filename, limits,
                                 f" in sheet '{sheet}' (it has a value in column {_col_letters(grid_cols)})")
            return
        row_depth = 0  # the row ended
        visited += width or 1
        if cap is not None and visited > cap:
            refuse(f"spreads its cells over more than {cap:,} positions up to row {row:,}", row,
                   max(grid_cols, width))

    parser = pyexpat.ParserCreate()
    parser.StartElementHandler = start
    parser.EndElementHandler = end
    try:
        with zf.open(info) as fh:
            while chunk := fh.read(1 << 20):
                parser.Parse(chunk, False)
            parser.Parse(b"", True)
    except pyexpat.ExpatError as exc:
        raise InputError(f"{where} of '{filename}' is not well-formed XML ({exc}); open and save the workbook "
                         "in a spreadsheet program.", code="not_a_table", details={"file": filename}) from None


def _read_xlsx(raw: bytes, filename: str, *, as_strings: bool = False, limits: IntakeLimits = IntakeLimits()
               ) -> tuple[pd.DataFrame, np.ndarray, list[str], dict]:
    notes: list[str] = []
    if raw[:4] == b"\xd0\xcf\x11\xe0":
        raise InputError(f"The file '{filename}' is an old Excel 97-2003 (.xls) workbook; save it as .xlsx "
                         "or CSV.", code="unsupported_format", details={"file": filename})
    _xlsx_guard(raw, filename, limits)  # the reader below builds the sheet's whole grid: size it up first
    try:
        book = pd.ExcelFile(io.BytesIO(raw), engine="openpyxl")
        sheets = book.sheet_names
        grids = []
        for sheet in sheets:  # the first sheet that holds a table (a 'Read me' sheet may come first)
            grid = pd.read_excel(book, sheet_name=sheet, header=None, dtype=object if as_strings else None,
                                 **({} if as_strings else {"na_values": EXTRA_NA_VALUES}))
            grid = grid.map(lambda v: np.nan if isinstance(v, str) and not v.strip() else v)
            grid = grid.dropna(how="all", axis=1)
            grids.append((sheet, grid))
            if grid.shape[1] >= 2 and grid.notna().any(axis=1).sum() >= 2:
                break
    except InputError:
        raise
    except Exception as exc:  # openpyxl raises many types for damaged or foreign files
        raise InputError(f"The file '{filename}' could not be opened as an XLSX workbook "
                         f"({type(exc).__name__}: {exc}).", code="not_a_table",
                         details={"file": filename}) from exc
    sheet, grid = grids[-1] if grids[-1][1].shape[1] >= 2 else grids[0]
    if len(sheets) > 1:
        skipped = [s for s, _ in grids if s != sheet]
        notes.append(f"The workbook '{filename}' has {len(sheets)} sheets; only '{sheet}' was read"
                     + (f" (the sheet{'s' if len(skipped) > 1 else ''} before it, {_quote_list(skipped)}, "
                        f"{'hold' if len(skipped) > 1 else 'holds'} no table)." if skipped else "."))
    grid = grid.dropna(how="all", axis=1)
    filled = grid.notna().sum(axis=1).to_numpy()
    nonblank = np.flatnonzero(filled > 0)
    if grid.shape[1] == 0 or len(nonblank) == 0:
        raise InputError(f"The file '{filename}' is empty.", code="empty_file", details={"file": filename})
    first = nonblank[0]
    titles = []
    if filled[nonblank[:30]].max() >= 3:  # single-cell title lines above the header row
        for r in nonblank:
            if filled[r] >= 2:
                break
            titles.append(r)
        if titles and len(titles) < len(nonblank) and not _mostly_numbers(
                grid.iloc[nonblank[len(titles)]].dropna().tolist()):
            first = nonblank[len(titles)]
            shown = "; ".join(f"row {r + 1}: '{_cell_text(grid.iloc[r].dropna().iat[0])[:60]}'" for r in titles[:3])
            notes.append(f"{_first_rows(len(titles))} of sheet '{sheet}' held a single cell ({shown}); "
                         f"{'it was' if len(titles) == 1 else 'they were'} read as a title, not as the header row.")
            grid = grid.astype(object)
            grid.iloc[:first] = np.nan
            grid = grid.dropna(how="all", axis=1)
    header = [grid.iat[first, j] for j in range(grid.shape[1])]
    names = _clean_header([_cell_text(h) for h in header], filename)
    body = grid.iloc[first + 1:]
    keep = body.notna().any(axis=1).to_numpy()
    row_numbers = (np.arange(first + 1, len(grid), dtype=np.int64) + 1)[keep]
    body = body.loc[keep]
    body.columns = names
    body = body.reset_index(drop=True)
    if as_strings:
        body = body.map(_cell_text)
    else:
        body = body.infer_objects()
    if len(names) < 2 and not as_strings:
        raise InputError(f"The file '{filename}' is not a table: its sheet '{sheet}' has a single column.",
                         code="not_a_table", details={"file": filename})
    formulas = []
    if not as_strings and len(body):
        empty = [j for j in range(len(names)) if body.iloc[:, j].isna().all()]
        formulas = _formula_columns(raw, sheet, first, [int(grid.columns[j]) for j in empty], len(grid))
        formulas = [names[empty[i]] for i in formulas]
    return body, row_numbers, notes, {"format": "xlsx", "sheet": sheet, "formula_columns": formulas,
                                      "unnamed": [names[j] for j in _unnamed(header)]}


def _formula_columns(raw: bytes, sheet: str, header_row: int, columns: list[int], n_rows: int) -> list[int]:
    """Which of these (0-based) sheet columns hold formulas whose results were never saved.

    A workbook written by a script (not saved by a spreadsheet program) keeps formulas without their
    values; the reader then sees empty cells. Returns positions into ``columns``.
    """
    if not columns:
        return []
    try:
        import openpyxl

        wb = openpyxl.load_workbook(io.BytesIO(raw), read_only=True, data_only=False)
        ws = wb[sheet]
        ws.reset_dimensions()  # rows padded only to the columns asked for, whatever the sheet declares
        found = set()
        for row in ws.iter_rows(min_row=header_row + 2, max_row=min(n_rows, header_row + 51), min_col=1,
                                max_col=max(columns) + 1, values_only=True):
            for i, col in enumerate(columns):
                v = row[col] if col < len(row) else None
                if isinstance(v, str) and v.startswith("="):
                    found.add(i)
        wb.close()
        return sorted(found)
    except Exception:  # noqa: BLE001  (only a better message is at stake)
        return []


def _cell_text(v) -> str:
    if v is None:
        return ""
    if isinstance(v, float):
        if np.isnan(v):
            return ""
        return _fmt_num(v)
    if isinstance(v, (bool, np.bool_)):
        return "true" if v else "false"
    return str(v).strip()


def _read_table(raw: bytes, filename: str, *, as_strings: bool = False, limits: IntakeLimits = IntakeLimits()):
    if raw is None or len(raw) == 0 or not raw.strip():
        raise InputError(f"The file '{filename}' is empty.", code="empty_file", details={"file": filename})
    try:
        if _is_xlsx(raw, filename):
            return _read_xlsx(raw, filename, as_strings=as_strings, limits=limits)
        return _read_delimited(raw, filename, as_strings=as_strings, limits=limits)
    except InputError:
        raise
    except Exception as exc:  # a file nobody foresaw: still a message naming it, never a crash
        raise InputError(f"The file '{filename}' could not be read as a table ({type(exc).__name__}: {exc}).",
                         code="not_a_table", details={"file": filename}) from exc


# --------------------------------------------------------------------------------------------------------
# codebook

_CB_ALIASES = {
    "item": {"item", "items", "itemname", "name", "variable", "var", "column", "itemid", "code", "variablename",
             "varname", "itemcode", "itemlabel", "itemno", "itemnumber", "columnname", "questionid", "qid"},
    "text": {"text", "itemtext", "wording", "label", "statement", "question", "content", "stem"},
    "construct": {"construct", "factor", "scale", "subscale", "dimension", "domain", "facet", "trait"},
    "reverse": {"reverse", "reversed", "reversekeyed", "reversescored", "reverscoded", "reversecoded", "keyed",
                "key", "rev"},
    "min": {"min", "minimum", "scalemin", "low", "lowest"},
    "max": {"max", "maximum", "scalemax", "high", "highest"},
    "range": {"range", "responserange", "scalerange", "valuerange", "answerrange"},
}
# Header words that start a role's column name when no alias matches exactly ('Reverse scored (Y/N)').
_CB_PREFIXES = (("itemtext", "text"), ("itemwording", "text"), ("question", "text"), ("statement", "text"),
                ("wording", "text"), ("reverse", "reverse"), ("min", "min"), ("max", "max"), ("item", "item"),
                ("variable", "item"), ("construct", "construct"), ("subscale", "construct"), ("range", "range"))
_RANGE = re.compile(r"^\s*([-+]?\d+(?:[.,]\d+)?)\s*(?:-|–|—|to|\.\.|:)\s*([-+]?\d+(?:[.,]\d+)?)\s*$",
                    re.IGNORECASE)
_REVERSE_TRUE = {"1", "yes", "y", "true", "t", "r", "rev", "reverse", "reversed", "-", "-1", "neg", "negative"}
_REVERSE_FALSE = {"0", "no", "n", "false", "f", "", "+", "+1", "pos", "positive", "nan", "none", "forward"}


def _reverse_key(text: str) -> str:
    """'1.0' -> '1', ' Yes ' -> 'yes', '-1.0' -> '-1': numbers written as decimals read as whole numbers."""
    key = text.strip().lower()
    if re.fullmatch(r"[-+]?\d+\.0*", key):
        key = key.split(".")[0]
    return key


def read_codebook(raw: bytes, filename: str, *, limits: IntakeLimits = IntakeLimits()) -> Codebook:
    """Read a codebook (CSV or XLSX) with columns item, text, construct, reverse, optional min and max.

    ``reverse`` accepts 1/0, yes/no, true/false, R (and +/- keying). Raises InputError naming the codebook
    file, row and value for anything it cannot use.
    """
    df, row_numbers, notes, _ = _read_table(raw, filename, as_strings=True, limits=limits)
    cols: dict[str, str] = {}
    for c in df.columns:
        key = _norm(c)
        for role, aliases in _CB_ALIASES.items():
            if key in aliases and role not in cols:
                cols[role] = c
                break
    guessed: list[str] = []
    for c in df.columns:
        if c in cols.values():
            continue
        key = _norm(c)
        role = next((r for prefix, r in _CB_PREFIXES if key.startswith(prefix) and r not in cols), None)
        if role is not None:
            cols[role] = c
            guessed.append(f"'{c}' as {role}")
    if guessed:
        notes.append(f"Columns of the codebook '{filename}' were matched by their names: {', '.join(guessed)}.")
    if "item" not in cols:
        raise InputError(
            f"The codebook '{filename}' has no 'item' column (found {_quote_list(df.columns, 10)}). It needs "
            "the columns item, text, construct, reverse and optionally min and max.",
            code="bad_codebook", details={"file": filename, "columns": [str(c) for c in df.columns]})
    entries: dict[str, CodebookEntry] = {}
    first_row: dict[str, int] = {}

    def cell(i: int, role: str) -> str:
        if role not in cols:
            return ""
        v = df[cols[role]].iat[i]
        return "" if v is None or (isinstance(v, float) and np.isnan(v)) else str(v).strip()

    def number(i: int, role: str) -> float | None:
        s = cell(i, role)
        if s == "":
            return None
        try:
            return float(s.replace(",", "."))
        except ValueError:
            raise InputError(
                f"The codebook '{filename}' has '{s}' in column '{cols[role]}', row {row_numbers[i]}; "
                f"{role} must be a number.", code="bad_codebook",
                details={"file": filename, "column": cols[role], "row": int(row_numbers[i]), "value": s}
            ) from None

    # Keying written as +1/-1 (1 = forward): then a 1 is not "reversed" as it is in a 0/1 column.
    signed_keys = "reverse" in cols and any(_reverse_key(cell(i, "reverse")) == "-1" for i in range(len(df)))
    for i in range(len(df)):
        name = re.sub(r"\s+", " ", cell(i, "item").replace("\ufeff", "").replace("\u200b", "")).strip()
        row = int(row_numbers[i])
        if not name:
            continue
        if name in entries:
            raise InputError(f"The codebook '{filename}' lists item '{name}' twice (rows {first_row[name]} and "
                             f"{row}).", code="bad_codebook",
                             details={"file": filename, "column": cols["item"], "row": row, "value": name})
        rev_text = cell(i, "reverse")
        rev_key = _reverse_key(rev_text)
        if signed_keys and rev_key in ("1", "+1"):  # keys written +1 / -1: 1 is the forward direction
            reverse = False
        elif rev_key in _REVERSE_TRUE:
            reverse = True
        elif rev_key in _REVERSE_FALSE:
            reverse = False
        else:
            raise InputError(
                f"The codebook '{filename}' has '{rev_text}' in column '{cols['reverse']}', row {row} "
                f"(item '{name}'); reverse must be 1/0, yes/no, true/false, R, or keys +1/-1.", code="bad_codebook",
                details={"file": filename, "column": cols["reverse"], "row": row, "value": rev_text})
        lo, hi = number(i, "min"), number(i, "max")
        span = cell(i, "range")
        if lo is None and hi is None and span:
            m = _RANGE.match(span)
            if m is None:
                raise InputError(
                    f"The codebook '{filename}' has '{span}' in column '{cols['range']}', row {row} (item "
                    f"'{name}'); a range is written like 1-5 or 0 to 4.", code="bad_codebook",
                    details={"file": filename, "column": cols["range"], "row": row, "value": span})
            lo, hi = (float(g.replace(",", ".")) for g in m.groups())
        if (lo is None) != (hi is None):
            raise InputError(f"The codebook '{filename}' gives only one of min and max for item '{name}' "
                             f"(row {row}); give both or neither.", code="bad_codebook",
                             details={"file": filename, "row": row, "item": name})
        if lo is not None and not lo < hi:
            raise InputError(f"The codebook '{filename}' gives min {_fmt_num(lo)} and max {_fmt_num(hi)} for "
                             f"item '{name}' (row {row}); min must be below max.", code="bad_codebook",
                             details={"file": filename, "row": row, "item": name, "value": [lo, hi]})
        construct = cell(i, "construct") or None
        entries[name] = CodebookEntry(item=name, text=cell(i, "text"), construct=construct, reverse=reverse,
                                      min=lo, max=hi)
        first_row[name] = row
    if not entries:
        raise InputError(f"The codebook '{filename}' lists no items.", code="bad_codebook",
                         details={"file": filename})
    return Codebook(entries=entries, warnings=tuple(notes))


# --------------------------------------------------------------------------------------------------------
# the response file


def _stem(name: str) -> str:
    """An item name without its trailing number: 'Q12' -> 'q', 'belong_3' -> 'belong'."""
    return re.sub(r"[\s_.\-]*\d+$", "", str(name).strip().lower())


def _column_kind(name: str) -> str | None:
    key = _norm(name)
    if key in ID_NAMES or re.search(r"(^|[ _.\-])id$", str(name).strip().lower()):
        return "id"
    if key in NON_ITEM_NAMES or re.match(
            r"q_(recaptcha|relevantid|totalduration|ballotbox|url|language|datapolicy|unanswered|straightlining)",
            str(name).strip().lower()):  # Qualtrics' own fields (Q_RecaptchaScore, Q_RelevantIDDuplicate)
        return "demographic"
    if key in SCORE_NAMES or re.search(r"[_ .\-](total|sum|mean|avg|average|score|sumscore|meanscore)$",
                                       str(name).strip().lower()):
        return "score"
    return None


def _looks_like_ids(values: pd.Series, n: int) -> bool:
    """Short codes, all present and all different (free-text comments are longer and have spaces)."""
    if n < 3 or not values.notna().all() or values.nunique() != n:
        return False
    text = values.astype(str).str.strip()
    return bool(text.str.len().mean() <= 32 and text.str.contains(r"\s").mean() < 0.5)


def _looks_like_labels(values: pd.Series) -> bool:
    """Answers exported as their labels ('Strongly agree'): a few distinct words, each given many times."""
    text = values.dropna().astype(str).str.strip()
    text = text[text != ""]
    if len(text) < 6:
        return False
    distinct = text.nunique()
    return bool(distinct <= 11 and distinct <= len(text) / 3 and text.str.contains(r"[A-Za-z]").mean() > 0.5)


def _looks_like_dates(values: pd.Series) -> bool:
    sample = values.dropna().astype(str).head(20)
    if sample.empty or not sample.str.contains(r"\d").all():
        return False
    if not sample.str.contains(r"[-/:.]").all():
        return False
    with _warnings.catch_warnings():
        _warnings.simplefilter("ignore")
        parsed = pd.to_datetime(sample, errors="coerce", format="mixed")
    return bool(parsed.notna().all())


def _numeric_mask(s: pd.Series) -> np.ndarray:
    """Which cells of a column read as numbers ('4', '4.0', '3,5')."""
    if pd.api.types.is_numeric_dtype(s.dtype):
        return s.notna().to_numpy()
    text = s.astype(str).str.strip()
    num = pd.to_numeric(text.where(~text.str.match(_DECIMAL_COMMA.pattern),
                                   text.str.replace(",", ".", regex=False)), errors="coerce")
    return (num.notna() & s.notna()).to_numpy()


def _skip_extra_header_rows(df: pd.DataFrame, row_numbers: np.ndarray, filename: str, notes: list[str],
                            unnamed: set[str] = frozenset()) -> tuple[pd.DataFrame, np.ndarray, dict[str, str]]:
    """Drop the extra header rows survey platforms write under the item codes.

    Qualtrics-style exports put the question text in row 2 and an import-ID row ('{"ImportId":"QID1"}')
    in row 3; other tools write one row of labels. A top row (of at most three) counts as a header row
    when, in the columns that hold numbers further down, it holds distinct text in at least half of them
    and (almost) no numbers. SurveyMonkey-style exports leave the header cells of a question's statements
    empty (a merged cell) and name the statements in row 2: those columns take their row-2 text as name.
    Returns the frame without those rows, their file row numbers, and the question text per column
    (taken from the first such row that is not an import-ID row) to use as item wording.
    """
    if len(df) < 6 or df.shape[1] < 2:
        return df, row_numbers, {}
    top = min(3, len(df) - 3)
    below = df.iloc[3:]
    numeric_cols = []
    for c in df.columns:
        s = below[c]
        nonnull = s.notna().to_numpy()
        if nonnull.sum() >= 3 and _numeric_mask(s)[nonnull].mean() >= 0.9:
            numeric_cols.append(c)
    if len(numeric_cols) < 2:
        return df, row_numbers, {}
    n_head = 0
    for i in range(top):
        cells = df[numeric_cols].iloc[i]
        isnum = _numeric_mask(cells)
        texts = [str(v).strip() for v, num in zip(cells, isnum) if pd.notna(v) and not num]
        if (len(texts) < max(2, 0.5 * len(numeric_cols)) or isnum.sum() > 0.2 * len(texts)
                or len(set(texts)) < 0.8 * len(texts)):
            break
        n_head = i + 1
    if n_head == 0:
        return df, row_numbers, {}
    header_text: dict[str, str] = {}
    for i in range(n_head):
        row = df.iloc[i]
        if sum(str(row[c]).strip().startswith("{") for c in numeric_cols) > len(numeric_cols) / 2:
            continue  # {"ImportId": "QID1"}
        for c in df.columns:
            v = row[c]
            if pd.notna(v) and not _numeric_mask(pd.Series([v])).any() and str(v).strip() and c not in header_text:
                header_text[str(c)] = str(v).strip()
    skipped = [int(r) for r in row_numbers[:n_head]]
    shown_col = next((c for c in numeric_cols if _column_kind(str(c)) is None), numeric_cols[0])
    example = str(df[shown_col].iloc[0]).strip()[:60]
    notes.append(f"{'Row' if n_head == 1 else 'Rows'} {' and '.join(map(str, skipped))} of '{filename}' "
                 f"{'holds' if n_head == 1 else 'hold'} text under the column names (such as '{example}' in column "
                 f"'{shown_col}'), as survey platforms export it; read as extra header "
                 f"{'row' if n_head == 1 else 'rows'}, not as respondents"
                 + ("; the question text is used as item wording where the codebook gives none." if header_text
                    else "."))
    # Merged question headers: a named column followed by unnamed ones, each with its own row-2 text.
    rename: dict[str, str] = {}
    cols = [str(c) for c in df.columns]
    for j, c in enumerate(cols):
        if c in unnamed and c in header_text:
            rename[c] = header_text[c]
            if j > 0 and cols[j - 1] not in unnamed and cols[j - 1] in header_text:
                rename.setdefault(cols[j - 1], header_text[cols[j - 1]])
    taken = set(cols) - set(rename)
    rename = {c: rename[c] for c in cols
              if c in rename and rename[c] not in taken and list(rename.values()).count(rename[c]) == 1}
    if rename:
        shown = "; ".join(f"'{c}' -> '{t}'" for c, t in list(rename.items())[:MAX_LISTED])
        notes.append(f"{_plural(len(rename), 'column')} under a shared (merged) question header took "
                     f"{'its name' if len(rename) == 1 else 'their names'} from row {skipped[0]}: {shown}"
                     f"{' and more' if len(rename) > MAX_LISTED else ''}.")
        df = df.rename(columns=rename)
        header_text = {rename.get(c, c): t for c, t in header_text.items()}
    df = df.iloc[n_head:].reset_index(drop=True)
    for c in df.columns:  # the text rows made these columns text; read the answers as numbers again
        if df[c].dtype == object:
            conv = pd.to_numeric(df[c], errors="coerce")
            if conv.notna().sum() == df[c].notna().sum():
                df[c] = conv
    return df, row_numbers[n_head:], header_text


def _as_written(raw: bytes, filename: str, limits: IntakeLimits, cells: list[dict]) -> list[dict]:
    """The cells with their text as the file writes it ('1e400' rather than the 'inf' it reads as).

    Only for error messages: the file is read again as text; a cell not found keeps its number.
    """
    try:
        df, rows, _, _ = _read_table(raw, filename, as_strings=True, limits=limits)
        position = {int(r): i for i, r in enumerate(rows)}
        for cell in cells:
            i = position.get(cell["row"])
            if i is not None and cell["column"] in df.columns:
                text = str(df[cell["column"]].iat[i]).strip()
                cell["value"] = text or cell["value"]
    except Exception:  # noqa: BLE001  (the message falls back to the number as read)
        return cells
    return cells


def _refuse_absurd(responses: np.ndarray, item_cols: list[str], row_numbers: np.ndarray, mins: np.ndarray,
                   maxs: np.ndarray, declared: np.ndarray, raw: bytes, filename: str,
                   limits: IntakeLimits) -> None:
    """Raise ``absurd_value`` naming the answers far outside any rating scale (rule: ``ABSURD_ABS``).

    A value beyond ABSURD_ABS (or ABSURD_SPREADS x the largest declared bound) in absolute value, or, for
    an item without a declared range, farther than ABSURD_SPREADS x max(P95 - P5, 1) from its median
    (common practice: a far-out fence as Tukey's, widened so only typos, overflows and codes are caught).
    Values merely outside a declared range are not absurd: they are set to missing with a warning.
    """
    k = responses.shape[1]
    if not k or not responses.shape[0]:
        return
    bound = np.full(k, ABSURD_ABS)
    if declared.any():
        widest = ABSURD_SPREADS * np.maximum(np.abs(mins), np.abs(maxs))
        bound[declared] = np.maximum(bound[declared], widest[declared])
    # A cheap screen first (fmin/fmax skip NaN and make no copy of the matrix); the median and percentiles
    # are computed only for the few columns that could hold an absurd value: the fence is at least
    # ABSURD_SPREADS wide, so a column whose whole range is narrower has none beyond it.
    with np.errstate(invalid="ignore"):
        lo = np.fmin.reduce(responses, axis=0)
        hi = np.fmax.reduce(responses, axis=0)
    suspect = (np.abs(lo) > bound) | (np.abs(hi) > bound) | (~declared & (hi - lo > ABSURD_SPREADS))
    if not suspect.any():
        return
    centre = np.zeros(k)
    flagged: list[tuple[int, np.ndarray]] = []
    for j in np.flatnonzero(suspect):
        col = responses[:, j]
        with np.errstate(invalid="ignore"):
            bad = np.abs(col) > bound[j]
            if not declared[j]:
                seen = col[~np.isnan(col)]
                if seen.size:
                    centre[j] = float(np.median(seen))
                    p5, p95 = np.percentile(seen, [5, 95])
                    bad |= np.abs(col - centre[j]) > ABSURD_SPREADS * max(p95 - p5, 1.0)
        rows = np.flatnonzero(bad)
        if rows.size:
            flagged.append((int(j), rows))
    if not flagged:
        return
    cells = []
    for j, rows in flagged:
        for i in rows:
            if len(cells) >= MAX_LISTED:
                break
            if declared[j]:
                usual = f"the item's range is {_fmt_num(mins[j])}-{_fmt_num(maxs[j])}"
            else:
                usual = f"its answers lie near {_fmt_num(centre[j])}"
            cells.append({"column": item_cols[j], "row": int(row_numbers[i]), "value": _fmt_num(responses[i, j]),
                          "expected": usual})
    total = sum(len(rows) for _, rows in flagged)
    cells = _as_written(raw, filename, limits, cells)
    shown = "; ".join(f"column '{b['column']}', row {b['row']}: {b['value']}, where {b['expected']}" for b in cells)
    raise InputError(
        f"The file '{filename}' has {_plural(total, 'absurd value')} in item columns ({shown}"
        f"{'; ...' if total > MAX_LISTED else ''}): far outside any rating scale, so probably a typo or a code. "
        "Correct these cells, declare codes such as 999 as missing codes, or remove the column if it is not an "
        "item.", code="absurd_value",
        details={"file": filename, **{key: cells[0][key] for key in ("column", "row", "value")}, "cells": cells,
                 "count": total})


def read_responses(raw: bytes, filename: str, *, codebook_raw: bytes | None = None,
                   codebook_filename: str | None = None, missing_codes: list[float] | None = None,
                   id_column: str | None = None, scale_min: float | None = None,
                   scale_max: float | None = None, limits: IntakeLimits = IntakeLimits()) -> ParsedDataset:
    """Read a response file (rows = respondents, columns = items) and its optional codebook.

    Parameters
    ----------
    raw, filename
        The file's bytes and its name (used in messages and to recognise XLSX).
    codebook_raw, codebook_filename
        Optional codebook (CSV or XLSX) with columns item, text, construct, reverse, optional min, max.
    missing_codes
        Values that mean "no answer" (e.g. ``[-9, 99]``); they become NaN.
    id_column
        The column holding respondent IDs; by default a column named like ``id``/``respondent`` or a text
        column of unique values is used.
    scale_min, scale_max
        The response range of every item when the codebook does not give one.
    limits
        What a file may cost (item columns, XLSX cells, unpacked bytes); :data:`NO_LIMITS` turns them off.

    Returns
    -------
    ParsedDataset
        RAW responses (not reverse-scored), NaN = missing; items in file order.

    Notes
    -----
    Delimiter (comma, semicolon, tab, vertical bar) and decimal comma are detected from the first
    256 KB; text is read as UTF-8 (with or without BOM) or, failing that, Latin-1 with a warning.
    Columns that are not items (IDs, free text, dates, demographics) are left out with a warning; with
    a codebook, a numeric column it does not list is kept as an item (with a warning) only when it is named
    like the codebook's items (``Q21`` beside ``Q1``..``Q20``), else left out.
    Values outside the declared range are set to missing with a warning naming the first cells; values
    that are not finite (``inf``, ``1e400``) or absurd (see ``ABSURD_ABS``) are errors; the text ``nan``
    is a missing value, as pandas reads it. Rows with no answer at all are dropped with a warning.
    An XLSX is sized up from its zip index and streamed sheet XML before any grid is built (413 when it
    would cost more than ``limits`` allow); more than ``limits.max_items`` item columns give 422.

    Survey-platform layouts are recognised, each with a warning: single-cell title rows above the header,
    up to three extra header rows under it (question text, an import-ID row; the question text becomes the
    item wording when the codebook gives none), statements named in row 2 under a merged question header,
    and, in a workbook, a first sheet without a table. Columns named like scores (total, sum, BEL_mean) and
    columns of distinct whole numbers above 100 (IDs) are not items.
    """
    filename = filename or "upload"
    notes: list[str] = []
    if (scale_min is None) != (scale_max is None):
        raise InputError("Give both scale_min and scale_max, or neither.", code="bad_range",
                         details={"scale_min": scale_min, "scale_max": scale_max})
    if scale_min is not None:
        scale_min, scale_max = float(scale_min), float(scale_max)
        if not (np.isfinite(scale_min) and np.isfinite(scale_max) and scale_min < scale_max):
            raise InputError(f"scale_min ({_fmt_num(scale_min)}) must be below scale_max "
                             f"({_fmt_num(scale_max)}).", code="bad_range",
                             details={"scale_min": scale_min, "scale_max": scale_max})
    codes = [float(c) for c in (missing_codes or [])]

    codebook: Codebook | None = None
    if codebook_raw is not None and len(codebook_raw) > 0:
        codebook = read_codebook(codebook_raw, codebook_filename or "codebook", limits=limits)
        notes.extend(codebook.warnings)

    df, row_numbers, read_notes, info = _read_table(raw, filename, limits=limits)
    notes.extend(read_notes)
    df, row_numbers, header_text = _skip_extra_header_rows(df, row_numbers, filename, notes,
                                                           set(info.get("unnamed", ())))
    columns = [str(c) for c in df.columns]
    unnamed = set(info.get("unnamed", ()))
    formula_cols = set(info.get("formula_columns", ()))

    # Codebook names are matched exactly, then ignoring case.
    cb_for: dict[str, CodebookEntry] = {}
    if codebook is not None:
        lower = {c.lower(): c for c in columns}
        for name, entry in codebook.entries.items():
            if name in columns:
                cb_for[name] = entry
            elif name.lower() in lower and lower[name.lower()] not in cb_for:
                cb_for[lower[name.lower()]] = entry

    id_column = str(id_column).strip() if id_column is not None else None
    id_column = id_column or None
    if id_column is not None and id_column not in columns:
        match = [c for c in columns if c.lower() == id_column.lower()]
        if not match:
            raise InputError(f"The ID column '{id_column}' is not in '{filename}' (its columns are "
                             f"{_quote_list(columns, 10)}).", code="unknown_column",
                             details={"file": filename, "column": id_column, "columns": columns[:50]})
        id_column = match[0]

    # With a codebook, a column it does not list stays an item only when it is named like the codebook's
    # items (Q21 beside Q1..Q20); anything else (visits_per_month, a score) is left out with a warning.
    cb_stems = {_stem(name) for name in codebook.entries} - {""} if codebook is not None else set()

    def outside_codebook(column: str) -> bool:
        return codebook is not None and column not in cb_for and _stem(column) not in cb_stems

    # ---- classify the columns
    left_out: list[tuple[str, str]] = []  # (column, why)
    item_cols: list[str] = []
    values: dict[str, np.ndarray] = {}
    bad_cells: list[dict] = []
    bad_counts: dict[str, int] = {}
    chosen_id = id_column
    n = len(df)
    for c in columns:
        if c == id_column:
            continue
        s = df[c]
        in_codebook = c in cb_for
        if s.isna().all():
            left_out.append((c, "formulas whose results were never saved: open and save the workbook in a "
                                "spreadsheet program, or paste the values" if c in formula_cols else "empty"))
            continue
        if pd.api.types.is_bool_dtype(s.dtype):
            left_out.append((c, "true/false values"))
            continue
        if pd.api.types.is_datetime64_any_dtype(s.dtype):
            left_out.append((c, "dates"))
            continue
        kind = None if in_codebook else _column_kind(c)
        if kind == "id":  # the first ID-named column is the ID, numeric or text; later ones are left out
            if chosen_id is None:
                chosen_id = c
            else:
                left_out.append((c, "ID-like name"))
            continue
        if pd.api.types.is_numeric_dtype(s.dtype):
            if kind == "demographic":
                left_out.append((c, "demographic or survey-metadata name"))
                continue
            if kind == "score":
                left_out.append((c, "named like a total or mean score, not an item"))
                continue
            if outside_codebook(c):
                left_out.append((c, "not in the codebook"))
                continue
            values[c] = s.to_numpy(dtype=np.float64, na_value=np.nan)
            item_cols.append(c)
            continue
        # text-typed column: an item column with a few bad cells, or a non-item column
        num = pd.to_numeric(s, errors="coerce")
        nonnull = s.notna().to_numpy()
        isnum = num.notna().to_numpy()
        unparsed = nonnull & ~isnum
        if unparsed.any():  # "3,5" in a comma-separated file (quoted): a decimal comma
            fixed = pd.to_numeric(s[unparsed].astype(str).str.strip().where(
                lambda t: t.str.match(_DECIMAL_COMMA.pattern)).str.replace(",", ".", regex=False),
                errors="coerce")
            if fixed.notna().any():
                num = num.copy()
                num[unparsed] = fixed.to_numpy()
                isnum = num.notna().to_numpy()
        share = isnum[nonnull].mean() if nonnull.any() else 0.0
        if not in_codebook and share >= 0.5 and kind is None and outside_codebook(c):
            left_out.append((c, "not in the codebook"))
            continue
        if in_codebook or (share >= 0.5 and kind is None):
            bad = np.flatnonzero(nonnull & ~isnum)
            if len(bad):
                bad_counts[c] = len(bad)
            for i in bad[:MAX_LISTED]:
                bad_cells.append({"column": c, "row": int(row_numbers[i]), "value": str(s.iat[i])})
            values[c] = num.to_numpy(dtype=np.float64, na_value=np.nan)
            item_cols.append(c)
            continue
        if kind == "demographic":
            left_out.append((c, "demographic or survey-metadata name"))
        elif kind == "score":
            left_out.append((c, "named like a total or mean score, not an item"))
        elif _looks_like_dates(s):
            left_out.append((c, "dates"))
        elif _looks_like_labels(s):
            labels = s.dropna().astype(str).str.strip().value_counts().index[:3].tolist()
            left_out.append((c, f"answer labels such as {_quote_list(labels, 3)}, not numbers"))
        elif chosen_id is None and id_column is None and _looks_like_ids(s, n):
            chosen_id = c
        else:
            left_out.append((c, "text"))

    if columns and all(is_number(c) for c in columns):
        notes.append(f"Every column name in '{filename}' is a number ({_quote_list(columns, 3)}); the first row "
                     "was read as column names. If it holds answers, add a header row of item names.")

    if bad_cells:
        first = bad_cells[0]
        shown = "; ".join(f"column '{b['column']}', row {b['row']}: '{b['value']}'" for b in bad_cells[:MAX_LISTED])
        total = sum(bad_counts.values())
        raise InputError(
            f"The file '{filename}' has {_plural(total, 'non-numeric cell')} in item columns "
            f"({shown}{'; ...' if total > MAX_LISTED else ''}). Item answers must be numbers: recode these as "
            "numbers, or empty the cells that mean 'no answer' (empty cells, NA, N/A, '.' and #NULL! are read "
            "as missing; numeric codes such as -9 can be declared as missing codes).",
            code="non_numeric",
            details={"file": filename, "column": first["column"], "row": first["row"], "value": first["value"],
                     "cells": bad_cells[:MAX_LISTED], "counts": bad_counts})

    # A first (or unnamed) column of unique, increasing integers numbers the rows: not an item.
    for c in list(item_cols):
        if c in cb_for or n < 10 or not (c == columns[0] or c in unnamed):
            continue
        v = values[c]
        if (not np.isnan(v).any() and np.all(v == np.round(v)) and np.all(np.diff(v) > 0)
                and v[-1] - v[0] >= n - 1):
            item_cols.remove(c)
            del values[c]
            if chosen_id is None:
                chosen_id = c
            else:
                left_out.append((c, "row numbers"))

    # A column of a different whole number above 100 in every row holds codes (IDs), not answers: no rating
    # scale (not even a 0-100 slider) reaches past 100, and entered as an item it would swamp every statistic.
    for c in list(item_cols):
        if c in cb_for or n < 10:
            continue
        v = values[c]
        if (not np.isnan(v).any() and np.all(v == np.round(v)) and np.nanmax(np.abs(v)) > 100
                and len(np.unique(v)) == n):
            item_cols.remove(c)
            del values[c]
            if chosen_id is None:
                chosen_id = c
            else:
                left_out.append((c, "a different whole number above 100 in every row, like IDs"))

    if chosen_id is not None and chosen_id != id_column:
        notes.append(f"Column '{chosen_id}' was used as the respondent ID (not an item); name another column "
                     "as the ID column if that is wrong.")
    if left_out:
        why = "; ".join(f"'{c}' ({w})" for c, w in left_out[:10])
        more = f"; and {len(left_out) - 10} more" if len(left_out) > 10 else ""
        one = len(left_out) == 1
        notes.append(f"{_plural(len(left_out), 'column')} that "
                     f"{'does not look like an item was' if one else 'do not look like items were'} "
                     f"left out: {why}{more}.")

    if limits.max_items is not None and len(item_cols) > limits.max_items:
        raise InputError(
            f"'{filename}' has {len(item_cols):,} item columns; at most {limits.max_items:,} are analysed (setting "
            "max_items). Upload the items of one scale (or a few) at a time, or start the server with a higher "
            "--max-items.", code="too_many_items",
            details={"file": filename, "items": len(item_cols), "limit": limits.max_items})

    # ---- the matrix
    k = len(item_cols)
    responses = np.empty((n, k), dtype=np.float64)
    for j, c in enumerate(item_cols):
        responses[:, j] = values.pop(c)
    ids_series = df[chosen_id] if chosen_id is not None else None
    del df, values
    infinite = np.isinf(responses)
    if infinite.any():
        cols_j, rows_i = np.nonzero(infinite.T)
        cells = _as_written(raw, filename, limits, [
            {"column": item_cols[j], "row": int(row_numbers[i]), "value": _fmt_num(responses[i, j])}
            for i, j in zip(rows_i[:MAX_LISTED], cols_j[:MAX_LISTED])])
        shown = "; ".join(f"column '{b['column']}', row {b['row']}: '{b['value']}'" for b in cells)
        raise InputError(
            f"The file '{filename}' has {_plural(len(rows_i), 'value')} in item columns that {'is' if len(rows_i) == 1 else 'are'} "
            f"not a finite number ({shown}{'; ...' if len(rows_i) > MAX_LISTED else ''}): infinity, or a number too "
            "large to be represented (beyond about 1.8e308). Correct these cells or empty them.",
            code="non_finite_value", details={"file": filename, **cells[0], "cells": cells, "count": len(rows_i)})

    if codes:
        hit = np.isin(responses, np.asarray(codes))
        n_hit = int(hit.sum())
        responses[hit] = np.nan
        if n_hit:
            notes.append(f"Missing codes {', '.join(_fmt_num(c) for c in codes)} marked "
                         f"{_plural(n_hit, 'cell')} as missing.")

    # ---- ranges: codebook, else form, else observed
    mins = np.full(k, np.nan)
    maxs = np.full(k, np.nan)
    sources: list[str] = []
    for j, c in enumerate(item_cols):
        e = cb_for.get(c)
        if e is not None and e.min is not None:
            mins[j], maxs[j] = e.min, e.max
            sources.append("codebook")
        elif scale_min is not None:
            mins[j], maxs[j] = scale_min, scale_max
            sources.append("form")
        else:
            sources.append("observed")
    declared = np.array([s != "observed" for s in sources], dtype=bool)
    _refuse_absurd(responses, item_cols, row_numbers, mins, maxs, declared, raw, filename, limits)
    if declared.any():
        with np.errstate(invalid="ignore"):
            outside = (responses < mins) | (responses > maxs)
        outside[:, ~declared] = False
        per_item = outside.sum(axis=0)
        if per_item.any():
            before = {j: responses[:, j].copy() for j in np.flatnonzero(per_item)}
            cols_j, rows_i = np.nonzero(outside.T)
            examples = "; ".join(f"column '{item_cols[j]}', row {int(row_numbers[i])}: {_fmt_num(responses[i, j])}"
                                 for j, i in zip(cols_j[:MAX_LISTED], rows_i[:MAX_LISTED]))
            responses[outside] = np.nan
            listed = [f"'{item_cols[j]}' {int(per_item[j])} (range {_fmt_num(mins[j])}-{_fmt_num(maxs[j])})"
                      for j in np.flatnonzero(per_item)]
            shifted = []
            for j in np.flatnonzero(per_item):
                seen = before[j][~np.isnan(before[j])]
                if seen.size and seen.max() - seen.min() <= maxs[j] - mins[j] and (
                        seen.min() < mins[j] or seen.max() > maxs[j]) and per_item[j] >= 0.05 * seen.size:
                    shifted.append(f"'{item_cols[j]}' ({_fmt_num(seen.min())}-{_fmt_num(seen.max())} against "
                                   f"{_fmt_num(mins[j])}-{_fmt_num(maxs[j])})")
            if shifted:
                notes.append(f"The answers of {_plural(len(shifted), 'item')} fit the declared range only after a "
                             f"shift: {', '.join(shifted[:10])}{' and more' if len(shifted) > 10 else ''}. The "
                             "file probably codes the answers differently (for example from 0 instead of 1); "
                             "check min and max in the codebook or scale_min and scale_max, or every analysis "
                             "runs on the answers left after the out-of-range ones were removed.")
            notes.append(f"{_plural(int(per_item.sum()), 'value')} outside the item's range "
                         f"{'was' if per_item.sum() == 1 else 'were'} set to missing: "
                         f"{', '.join(listed[:10])}{' and more' if len(listed) > 10 else ''}; "
                         f"{'the cell is' if per_item.sum() == 1 else 'first cells:'} {examples}"
                         f"{'; ...' if per_item.sum() > MAX_LISTED else ''}.")
        del outside

    # ---- rows with no answer at all
    empty_rows = np.isnan(responses).all(axis=1) if k else np.ones(n, dtype=bool)
    n_empty = int(empty_rows.sum())
    if n_empty:
        rows = row_numbers[empty_rows]
        shown = ", ".join(str(int(r)) for r in rows[:MAX_LISTED]) + (", ..." if n_empty > MAX_LISTED else "")
        notes.append(f"{_plural(n_empty, 'row')} with no item answers {'was' if n_empty == 1 else 'were'} "
                     f"dropped (file rows {shown}); {_plural(n - n_empty, 'row')} remain.")
        keep = ~empty_rows
        responses = responses[keep]
        row_numbers = row_numbers[keep]
        if ids_series is not None:
            ids_series = ids_series[keep]
    n_rows = responses.shape[0]

    # ---- items that have no valid answer left
    all_nan = np.isnan(responses).all(axis=0) if n_rows else np.ones(k, dtype=bool)
    if k and all_nan.any() and n_rows:
        gone = [item_cols[j] for j in np.flatnonzero(all_nan)]
        notes.append(f"{_plural(len(gone), 'item')} with no valid answer left {'was' if len(gone) == 1 else 'were'}"
                     f" left out: {_quote_list(gone, 10)}.")
        keep_cols = ~all_nan
        responses = responses[:, keep_cols]
        item_cols = [c for c, kp in zip(item_cols, keep_cols) if kp]
        mins, maxs = mins[keep_cols], maxs[keep_cols]
        sources = [s for s, kp in zip(sources, keep_cols) if kp]
        k = len(item_cols)

    if k < 2:
        labelled = [c for c, w in left_out if w.startswith("answer labels")]
        hint = (f" Columns {_quote_list(labelled, 5)} hold answer labels, not numbers: export the numeric "
                "values (the choice codes) or recode the labels as numbers, e.g. 1 = strongly disagree to "
                "5 = strongly agree." if labelled else "")
        raise InputError(
            f"The file '{filename}' has {_plural(k, 'item column')}{': ' + _quote_list(item_cols) if k else ''}; "
            f"at least 2 are needed.{hint} Columns left out: "
            f"{', '.join(f'{c} ({w})' for c, w in left_out[:10]) or 'none'}.",
            code="too_few_items",
            details={"file": filename, "items": item_cols, "left_out": [c for c, _ in left_out],
                     "id_column": chosen_id})
    if n_rows < 3:
        raise InputError(f"The file '{filename}' has {_plural(n_rows, 'respondent')} with answers; at least 3 "
                         "are needed.", code="too_few_respondents",
                         details={"file": filename, "n_rows": n_rows})

    obs_min = np.nanmin(responses, axis=0)
    obs_max = np.nanmax(responses, axis=0)
    observed = np.array([s == "observed" for s in sources], dtype=bool)
    mins[observed], maxs[observed] = obs_min[observed], obs_max[observed]
    if observed.any():
        notes.append(f"No response range was given for {_plural(int(observed.sum()), 'item')}; the range was "
                     "taken from the answers observed (give scale_min and scale_max or a codebook with min and "
                     "max if the scale is wider).")
    constant = np.flatnonzero(obs_min == obs_max)
    for j in constant:
        notes.append(f"Item '{item_cols[j]}' is constant (every answer is {_fmt_num(obs_min[j])}); "
                     "it has no variance.")

    n_missing = np.isnan(responses).sum(axis=0)
    sparse = [f"'{item_cols[j]}' ({int(n_missing[j])} of {n_rows})" for j in np.flatnonzero(n_missing > n_rows / 2)]
    if sparse:
        notes.append(f"{_plural(len(sparse), 'item')} {'is' if len(sparse) == 1 else 'are'} missing for more than "
                     f"half of the respondents: {', '.join(sparse[:10])}{' and more' if len(sparse) > 10 else ''}. "
                     "Check that the column holds this item's answers (a branch of the survey, a renamed "
                     "question); its statistics rest on the few who answered.")

    # ---- codebook agreement
    if codebook is not None:
        matched_entries = {e.item for e in cb_for.values()}
        absent = [name for name in codebook.entries if name not in matched_entries]
        if absent:
            notes.append(f"{_plural(len(absent), 'codebook item')} {'is' if len(absent) == 1 else 'are'} not in "
                         f"the file: {_quote_list(absent, 10)}.")
        uncoded = [c for c in item_cols if c not in cb_for]
        if uncoded:
            notes.append(f"{_plural(len(uncoded), 'item')} in the file {'is' if len(uncoded) == 1 else 'are'} not "
                         f"in the codebook (no text, construct or keying): {_quote_list(uncoded, 10)}.")

    items = []
    for j, c in enumerate(item_cols):
        e = cb_for.get(c)
        text = (e.text if e else "") or header_text.get(c, "")
        items.append(ItemMeta(name=c, text=text, construct=e.construct if e else None,
                              reverse=bool(e.reverse) if e else False, min=float(mins[j]), max=float(maxs[j]),
                              n_missing=int(n_missing[j]), range_source=sources[j]))

    ids = None
    if ids_series is not None:
        ids = [_id_text(v) for v in ids_series.tolist()]
        dup = len(ids) - len(set(ids))
        if dup:
            counts = pd.Series(ids).value_counts()
            repeated = counts[counts > 1]
            shown = ", ".join(f"'{v}' ({int(m)} times)" for v, m in repeated.iloc[:MAX_LISTED].items())
            more = f" and {len(repeated) - MAX_LISTED} more" if len(repeated) > MAX_LISTED else ""
            notes.append(f"The ID column '{chosen_id}' has {_plural(dup, 'repeated value')}: {shown}{more}. "
                         "Each row is still read as a respondent; check for duplicate submissions, and match "
                         "waves only on unique IDs.")

    name = PurePath(filename).stem or filename
    return ParsedDataset(name=name, items=items, responses=np.ascontiguousarray(responses), ids=ids,
                         id_column=chosen_id, n_rows=n_rows, warnings=notes)


def is_number(text: str) -> bool:
    """Whether a cell's text reads as a number (float() accepts it)."""
    try:
        float(text)
    except ValueError:
        return False
    return True


def _id_text(v) -> str:
    if v is None:
        return ""
    if isinstance(v, float):
        return "" if np.isnan(v) else _fmt_num(v)
    return str(v).strip()
