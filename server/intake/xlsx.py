"""XLSX workbooks: the guards that size a workbook up before any grid is built, and reading its table.

An XLSX is a zip of XML parts. Before openpyxl (through pandas) builds a sheet's whole grid, the zip's
member count, its declared unpacked size and every worksheet's extent are checked by streaming
(:func:`xlsx_guard`); a workbook that would cost more than :class:`IntakeLimits` allow is refused (413).
"""
from __future__ import annotations

import io
import posixpath
import pyexpat
import re
import xml.etree.ElementTree as ET
import zipfile
from collections.abc import Iterator
from typing import IO, Any, NoReturn

import numpy as np
import pandas as pd

from ..stats.errors import InputError
from .common import (
    DEFAULT_LIMITS,
    EXTRA_NA_VALUES,
    NO_LIMITS,
    IntakeLimits,
    cell_text,
    check_width,
    clean_header,
    first_rows,
    quote_list,
    unnamed,
)
from .text import mostly_numbers

MAX_XLSX_PARTS = 10_000  # a workbook is a few dozen zip members; a zip of more is not read (its index alone is big)
MAX_XML_DEPTH = 64       # sheet XML nests about six deep (worksheet/sheetData/row/c/is/r/t)


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


def _local(tag: Any) -> str:
    return tag.rpartition("}")[2] if isinstance(tag, str) else ""


def _xml_events(fh: IO[bytes], where: str, filename: str) -> Iterator[tuple[str, Any]]:
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


def xlsx_guard(raw: bytes, filename: str, limits: IntakeLimits) -> None:
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

    def refuse(what: str, rows: int, cols: int, **extra: Any) -> NoReturn:
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

    def start(name: str, attrs: dict[str, str]) -> None:
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

    def end(name: str) -> None:
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
                    check_width(grid_cols, filename, limits,
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


def read_xlsx(raw: bytes, filename: str, *, as_strings: bool = False, limits: IntakeLimits = DEFAULT_LIMITS
              ) -> tuple[pd.DataFrame, np.ndarray, list[str], dict]:
    """Read the first sheet that holds a table. Returns (frame, file row numbers, warnings, info)."""
    notes: list[str] = []
    if raw[:4] == b"\xd0\xcf\x11\xe0":
        raise InputError(f"The file '{filename}' is an old Excel 97-2003 (.xls) workbook; save it as .xlsx "
                         "or CSV.", code="unsupported_format", details={"file": filename})
    xlsx_guard(raw, filename, limits)  # the reader below builds the sheet's whole grid: size it up first
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
                     + (f" (the sheet{'s' if len(skipped) > 1 else ''} before it, {quote_list(skipped)}, "
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
        if titles and len(titles) < len(nonblank) and not mostly_numbers(
                grid.iloc[nonblank[len(titles)]].dropna().tolist()):
            first = nonblank[len(titles)]
            shown = "; ".join(f"row {r + 1}: '{cell_text(grid.iloc[r].dropna().iat[0])[:60]}'" for r in titles[:3])
            notes.append(f"{first_rows(len(titles))} of sheet '{sheet}' held a single cell ({shown}); "
                         f"{'it was' if len(titles) == 1 else 'they were'} read as a title, not as the header row.")
            grid = grid.astype(object)
            grid.iloc[:first] = np.nan
            grid = grid.dropna(how="all", axis=1)
    header = [grid.iat[first, j] for j in range(grid.shape[1])]
    names = clean_header([cell_text(h) for h in header], filename)
    body = grid.iloc[first + 1:]
    keep = body.notna().any(axis=1).to_numpy()
    row_numbers = (np.arange(first + 1, len(grid), dtype=np.int64) + 1)[keep]
    body = body.loc[keep]
    body.columns = names
    body = body.reset_index(drop=True)
    body = body.map(cell_text) if as_strings else body.infer_objects()
    if len(names) < 2 and not as_strings:
        raise InputError(f"The file '{filename}' is not a table: its sheet '{sheet}' has a single column.",
                         code="not_a_table", details={"file": filename})
    formulas = []
    if not as_strings and len(body):
        empty = [j for j in range(len(names)) if body.iloc[:, j].isna().all()]
        formulas = _formula_columns(raw, sheet, first, [int(grid.columns[j]) for j in empty], len(grid))
        formulas = [names[empty[i]] for i in formulas]
    return body, row_numbers, notes, {"format": "xlsx", "sheet": sheet, "formula_columns": formulas,
                                      "unnamed": [names[j] for j in unnamed(header)]}


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

