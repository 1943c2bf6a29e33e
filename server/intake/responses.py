"""Reading a response file and its codebook into a validated matrix, as a pipeline of named steps.

:func:`read_responses` runs, in order (each step a function below, taking and returning plain values):

1. ``_form``         the form's options: scale range (both or neither, min below max) and missing codes
2. ``_codebook``     the codebook file, when one is given (:mod:`.codebook`)
3. ``_table``        bytes -> decoded text or workbook -> table of cells (:mod:`.text`, :mod:`.xlsx`),
                     without the extra header rows survey platforms write (:mod:`.header`)
4. codebook match    columns -> codebook entries (:func:`.codebook.match_codebook`) and the named ID column
5. column roles      items, the ID, columns left out (:func:`.columns.classify_columns`); ``_accept_roles``
                     refuses text in item columns and too many items, and says what was left out
6. ``_matrix``       the items' numbers as one matrix; non-finite values refused, missing codes applied; each
                     column's extremes and missing count (:class:`.values.ColumnSummary`, found once in
                     step 5) screen every check from here on, so a clean file is not read again cell by cell
7. ``_ranges``       each item's declared range; absurd values refused, values outside the range dropped
8. ``_drop_empty``   rows and items without an answer; at least 2 items and 3 respondents
9. ``_result``       observed ranges, the warnings on items and codebook, respondent IDs -> ParsedDataset
"""
from __future__ import annotations

from dataclasses import asdict, dataclass, field
from pathlib import PurePath
from typing import Any

import numpy as np
import pandas as pd

from ..stats.errors import InputError
from .codebook import Codebook, CodebookEntry, match_codebook, read_codebook
from .columns import Roles, classify_columns, named_id_column
from .common import DEFAULT_LIMITS, MAX_LISTED, IntakeLimits, fmt_num, is_number, plural, quote_list
from .header import skip_extra_header_rows
from .table import read_table
from .values import (
    ColumnSummary,
    apply_missing_codes,
    declared_ranges,
    out_of_range_to_missing,
    refuse_absurd,
    refuse_non_finite,
    refuse_non_numeric,
)


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

    ``responses`` holds RAW values (reverse-keyed items are NOT reverse-scored), NaN = missing; C-ordered, or
    column-major when a large all-number file was read in chunks straight into it (no second copy).
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
class _Form:
    """The options given beside the file: one range for every item (or none) and the missing codes."""

    scale_min: float | None
    scale_max: float | None
    codes: list[float]


@dataclass
class _Table:
    """The cells of the response file, one row per respondent, with what the reading learned."""

    frame: pd.DataFrame
    row_numbers: np.ndarray  # the file's row of each frame row (1-based, the header is row 1)
    header_text: dict[str, str]  # question text per column, from extra header rows
    unnamed: set[str]
    formula_columns: set[str]
    block: np.ndarray | None = None  # a matrix the frame's number columns are views of (large numeric CSV)

    @property
    def columns(self) -> list[str]:
        return [str(c) for c in self.frame.columns]


@dataclass
class _Matrix:
    """Respondents x items, RAW values, NaN = missing; with each row's file row number and ID cell, and the
    columns' smallest and largest values and missing counts (kept up to date as cells are set to missing)."""

    responses: np.ndarray
    items: list[str]
    row_numbers: np.ndarray
    ids: pd.Series | None
    summary: ColumnSummary


@dataclass
class _Ranges:
    """Each item's range and where it comes from; NaN until observed when nothing declared it."""

    mins: np.ndarray
    maxs: np.ndarray
    sources: list[str] = field(default_factory=list)  # codebook, form or observed, per item


def read_responses(raw: bytes, filename: str, *, codebook_raw: bytes | None = None,
                   codebook_filename: str | None = None, missing_codes: list[float] | None = None,
                   id_column: str | None = None, scale_min: float | None = None,
                   scale_max: float | None = None, limits: IntakeLimits = DEFAULT_LIMITS) -> ParsedDataset:
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
    form = _form(scale_min, scale_max, missing_codes)
    notes: list[str] = []
    codebook = _codebook(codebook_raw, codebook_filename, limits, notes)
    table = _table(raw, filename, limits, notes)
    matched = match_codebook(table.columns, codebook)
    named_id = named_id_column(id_column, table.columns, filename)
    roles = classify_columns(table.frame, codebook=codebook, matched=matched, id_column=named_id,
                             unnamed=table.unnamed, formula_columns=table.formula_columns)
    _accept_roles(roles, table, named_id, filename, limits, notes)
    header_text = table.header_text
    matrix = _matrix(table, roles, raw, filename, limits, form.codes, notes)
    del table  # the cells are in the matrix now
    ranges = _ranges(matrix, matched, form, raw, filename, limits, notes)
    matrix, ranges = _drop_empty(matrix, ranges, roles, filename, notes)
    return _result(matrix, ranges, matched, codebook, header_text, roles.id_column, filename, notes)


def _form(scale_min: float | None, scale_max: float | None, missing_codes: list[float] | None) -> _Form:
    """Check the scale range given on the form (both or neither, finite, min below max)."""
    if (scale_min is None) != (scale_max is None):
        raise InputError("Give both scale_min and scale_max, or neither.", code="bad_range",
                         details={"scale_min": scale_min, "scale_max": scale_max})
    if scale_min is not None and scale_max is not None:
        scale_min, scale_max = float(scale_min), float(scale_max)
        if not (np.isfinite(scale_min) and np.isfinite(scale_max) and scale_min < scale_max):
            raise InputError(f"scale_min ({fmt_num(scale_min)}) must be below scale_max "
                             f"({fmt_num(scale_max)}).", code="bad_range",
                             details={"scale_min": scale_min, "scale_max": scale_max})
    return _Form(scale_min, scale_max, [float(c) for c in (missing_codes or [])])


def _codebook(raw: bytes | None, filename: str | None, limits: IntakeLimits, notes: list[str]) -> Codebook | None:
    """Read the codebook when one is given; its warnings come first."""
    if raw is None or len(raw) == 0:
        return None
    codebook = read_codebook(raw, filename or "codebook", limits=limits)
    notes.extend(codebook.warnings)
    return codebook


def _table(raw: bytes, filename: str, limits: IntakeLimits, notes: list[str]) -> _Table:
    """Decode and read the file into a table of cells, then set aside the extra header rows."""
    df, row_numbers, read_notes, info = read_table(raw, filename, limits=limits)
    notes.extend(read_notes)
    unnamed = set(info.get("unnamed", ()))
    df, row_numbers, header_text = skip_extra_header_rows(df, row_numbers, filename, notes, unnamed)
    return _Table(df, row_numbers, header_text, unnamed, set(info.get("formula_columns", ())), info.get("matrix"))


def _accept_roles(roles: Roles, table: _Table, named_id: str | None, filename: str, limits: IntakeLimits,
                  notes: list[str]) -> None:
    """Say which column is the ID (unless the user named it) and which were left out; refuse text in item
    columns and too many items."""
    columns = table.columns
    if columns and all(is_number(c) for c in columns):
        notes.append(f"Every column name in '{filename}' is a number ({quote_list(columns, 3)}); the first row "
                     "was read as column names. If it holds answers, add a header row of item names.")
    refuse_non_numeric(table.frame, roles.not_numbers, table.row_numbers, filename)
    if roles.id_column is not None and roles.id_column != named_id:
        notes.append(f"Column '{roles.id_column}' was used as the respondent ID (not an item); name another "
                     "column as the ID column if that is wrong.")
    left_out = roles.left_out
    if left_out:
        why = "; ".join(f"'{c}' ({w})" for c, w in left_out[:10])
        more = f"; and {len(left_out) - 10} more" if len(left_out) > 10 else ""
        one = len(left_out) == 1
        notes.append(f"{plural(len(left_out), 'column')} that "
                     f"{'does not look like an item was' if one else 'do not look like items were'} "
                     f"left out: {why}{more}.")
    if limits.max_items is not None and len(roles.items) > limits.max_items:
        raise InputError(
            f"'{filename}' has {len(roles.items):,} item columns; at most {limits.max_items:,} are analysed "
            "(setting max_items). Upload the items of one scale (or a few) at a time, or start the server with a "
            "higher --max-items.", code="too_many_items",
            details={"file": filename, "items": len(roles.items), "limit": limits.max_items})


def _matrix(table: _Table, roles: Roles, raw: bytes, filename: str, limits: IntakeLimits, codes: list[float],
            notes: list[str]) -> _Matrix:
    """The item columns as one matrix (their arrays are moved in, not copied twice); then values checked."""
    n, k = len(table.frame), len(roles.items)
    if _is_block(table.block, roles, n):  # the items are the whole matrix the file was read into: no copy
        responses = table.block
        roles.values.clear()
    else:
        responses = np.empty((n, k), dtype=np.float64)
        for j, c in enumerate(roles.items):
            responses[:, j] = roles.values.pop(c)
    ids = table.frame[roles.id_column] if roles.id_column is not None else None
    # the checks below and the ranges read the columns' extremes and missing counts, found once in classify_columns
    if all(c in roles.stats for c in roles.items):
        summary = ColumnSummary.of_columns([roles.stats[c] for c in roles.items])
    else:
        summary = ColumnSummary.of(responses)
    refuse_non_finite(responses, roles.items, table.row_numbers, raw, filename, limits, summary)
    if apply_missing_codes(responses, codes, notes, summary):
        summary = ColumnSummary.of(responses)
    return _Matrix(responses, list(roles.items), table.row_numbers, ids, summary)


def _is_block(block: np.ndarray | None, roles: Roles, n: int) -> bool:
    """Whether the item columns, in order, are exactly the columns of ``block`` (their values are views of it)."""
    if block is None or block.shape != (n, len(roles.items)) or not block.flags.f_contiguous:
        return False
    for j, c in enumerate(roles.items):
        v, col = roles.values[c], block[:, j]
        if v.shape != col.shape or v.strides != col.strides or v.ctypes.data != col.ctypes.data:
            return False
    return True


def _ranges(matrix: _Matrix, matched: dict[str, CodebookEntry], form: _Form, raw: bytes, filename: str,
            limits: IntakeLimits, notes: list[str]) -> _Ranges:
    """Each item's range (codebook, else form, else observed later); absurd values refused, values outside
    a declared range set to missing."""
    mins, maxs, sources = declared_ranges(matrix.items, matched, form.scale_min, form.scale_max)
    declared = np.array([s != "observed" for s in sources], dtype=bool)
    refuse_absurd(matrix.responses, matrix.items, matrix.row_numbers, mins, maxs, declared, raw, filename, limits,
                  matrix.summary)
    if out_of_range_to_missing(matrix.responses, matrix.items, matrix.row_numbers, mins, maxs, declared, notes,
                               matrix.summary):
        matrix.summary = ColumnSummary.of(matrix.responses)
    return _Ranges(mins, maxs, sources)


def _drop_empty(matrix: _Matrix, ranges: _Ranges, roles: Roles, filename: str, notes: list[str]
                ) -> tuple[_Matrix, _Ranges]:
    """Drop rows with no answer and items with no valid answer left; refuse fewer than 2 items or 3 rows."""
    responses, items, row_numbers, ids = matrix.responses, matrix.items, matrix.row_numbers, matrix.ids
    lo, hi, n_missing = matrix.summary.lo, matrix.summary.hi, matrix.summary.n_missing
    n, k = responses.shape
    if k and not n_missing.min():  # a column without a missing cell: no row is empty
        empty_rows = np.zeros(n, dtype=bool)
    else:
        empty_rows = np.isnan(responses).all(axis=1) if k else np.ones(n, dtype=bool)
    n_empty = int(empty_rows.sum())
    if n_empty:
        rows = row_numbers[empty_rows]
        shown = ", ".join(str(int(r)) for r in rows[:MAX_LISTED]) + (", ..." if n_empty > MAX_LISTED else "")
        notes.append(f"{plural(n_empty, 'row')} with no item answers {'was' if n_empty == 1 else 'were'} "
                     f"dropped (file rows {shown}); {plural(n - n_empty, 'row')} remain.")
        keep = ~empty_rows
        responses = responses[keep]
        row_numbers = row_numbers[keep]
        if ids is not None:
            ids = ids[keep]
        n_missing = n_missing - n_empty  # every dropped row was missing in every column
    n_rows = responses.shape[0]

    mins, maxs, sources = ranges.mins, ranges.maxs, ranges.sources
    all_nan = n_missing == n_rows if n_rows else np.ones(k, dtype=bool)
    if k and all_nan.any() and n_rows:
        gone = [items[j] for j in np.flatnonzero(all_nan)]
        notes.append(f"{plural(len(gone), 'item')} with no valid answer left {'was' if len(gone) == 1 else 'were'}"
                     f" left out: {quote_list(gone, 10)}.")
        keep_cols = ~all_nan
        responses = responses[:, keep_cols]
        items = [c for c, kp in zip(items, keep_cols, strict=True) if kp]
        mins, maxs = mins[keep_cols], maxs[keep_cols]
        lo, hi, n_missing = lo[keep_cols], hi[keep_cols], n_missing[keep_cols]
        sources = [s for s, kp in zip(sources, keep_cols, strict=True) if kp]
        k = len(items)

    if k < 2:
        left_out = roles.left_out
        labelled = [c for c, w in left_out if w.startswith("answer labels")]
        hint = (f" Columns {quote_list(labelled, 5)} hold answer labels, not numbers: export the numeric "
                "values (the choice codes) or recode the labels as numbers, e.g. 1 = strongly disagree to "
                "5 = strongly agree." if labelled else "")
        raise InputError(
            f"The file '{filename}' has {plural(k, 'item column')}{': ' + quote_list(items) if k else ''}; "
            f"at least 2 are needed.{hint} Columns left out: "
            f"{', '.join(f'{c} ({w})' for c, w in left_out[:10]) or 'none'}"
            f"{f' and {len(left_out) - 10} more' if len(left_out) > 10 else ''}.",
            code="too_few_items",
            details={"file": filename, "items": items, "left_out": [c for c, _ in left_out],
                     "id_column": roles.id_column})
    if n_rows < 3:
        raise InputError(f"The file '{filename}' has {plural(n_rows, 'respondent')} with answers; at least 3 "
                         "are needed.", code="too_few_respondents",
                         details={"file": filename, "n_rows": n_rows})
    return (_Matrix(responses, items, row_numbers, ids, ColumnSummary(lo, hi, n_missing)),
            _Ranges(mins, maxs, sources))


def _result(matrix: _Matrix, ranges: _Ranges, matched: dict[str, CodebookEntry], codebook: Codebook | None,
            header_text: dict[str, str], id_column: str | None, filename: str, notes: list[str]) -> ParsedDataset:
    """Fill in observed ranges, warn about constant, sparse and uncoded items and repeated IDs; build the answer."""
    responses, items = matrix.responses, matrix.items
    mins, maxs, sources = ranges.mins, ranges.maxs, ranges.sources
    n_rows = responses.shape[0]
    obs_min, obs_max = matrix.summary.lo.copy(), matrix.summary.hi.copy()  # NaN skipped, as nanmin and nanmax
    observed = np.array([s == "observed" for s in sources], dtype=bool)
    mins[observed], maxs[observed] = obs_min[observed], obs_max[observed]
    if observed.any():
        notes.append(f"No response range was given for {plural(int(observed.sum()), 'item')}; the range was "
                     "taken from the answers observed (give scale_min and scale_max or a codebook with min and "
                     "max if the scale is wider).")
    for j in np.flatnonzero(obs_min == obs_max):
        notes.append(f"Item '{items[j]}' is constant (every answer is {fmt_num(obs_min[j])}); "
                     "it has no variance.")

    n_missing = matrix.summary.n_missing
    sparse = [f"'{items[j]}' ({int(n_missing[j])} of {n_rows})" for j in np.flatnonzero(n_missing > n_rows / 2)]
    if sparse:
        more = f" and {len(sparse) - 10} more" if len(sparse) > 10 else ""
        notes.append(f"{plural(len(sparse), 'item')} {'is' if len(sparse) == 1 else 'are'} missing for more than "
                     f"half of the respondents: {', '.join(sparse[:10])}{more}. "
                     "Check that the column holds this item's answers (a branch of the survey, a renamed "
                     "question); its statistics rest on the few who answered.")

    if codebook is not None:
        matched_entries = {e.item for e in matched.values()}
        absent = [name for name in codebook.entries if name not in matched_entries]
        if absent:
            notes.append(f"{plural(len(absent), 'codebook item')} {'is' if len(absent) == 1 else 'are'} not in "
                         f"the file: {quote_list(absent, 10)}.")
        uncoded = [c for c in items if c not in matched]
        if uncoded:
            notes.append(f"{plural(len(uncoded), 'item')} in the file {'is' if len(uncoded) == 1 else 'are'} not "
                         f"in the codebook (no text, construct or keying): {quote_list(uncoded, 10)}.")

    metas = []
    for j, c in enumerate(items):
        e = matched.get(c)
        text = (e.text if e else "") or header_text.get(c, "")
        metas.append(ItemMeta(name=c, text=text, construct=e.construct if e else None,
                              reverse=bool(e.reverse) if e else False, min=float(mins[j]), max=float(maxs[j]),
                              n_missing=int(n_missing[j]), range_source=sources[j]))

    ids = None
    if matrix.ids is not None:
        ids = _id_texts(matrix.ids)
        dup = len(ids) - len(set(ids))
        if dup:
            counts = pd.Series(ids).value_counts()
            repeated = counts[counts > 1]
            shown = ", ".join(f"'{v}' ({int(m)} times)" for v, m in repeated.iloc[:MAX_LISTED].items())
            more = f" and {len(repeated) - MAX_LISTED} more" if len(repeated) > MAX_LISTED else ""
            notes.append(f"The ID column '{id_column}' has {plural(dup, 'repeated value')}: {shown}{more}. "
                         "Each row is still read as a respondent; check for duplicate submissions, and match "
                         "waves only on unique IDs.")

    name = PurePath(filename).stem or filename
    if not responses.flags.f_contiguous:  # a large file's matrix stays column-major: no second copy
        responses = np.ascontiguousarray(responses)
    return ParsedDataset(name=name, items=metas, responses=responses, ids=ids,
                         id_column=id_column, n_rows=n_rows, warnings=notes)


def _id_texts(ids: pd.Series) -> list[str]:
    """:func:`id_text` of every cell; a column of text (pandas' string type) stripped in one step."""
    if isinstance(ids.dtype, pd.StringDtype) and ids.dtype.na_value is np.nan:  # missing: NaN, as id_text reads
        cells = ids.tolist()
        try:
            return list(map(str.strip, cells))  # every cell filled (str.strip refuses the NaN of a missing one)
        except TypeError:
            return [v.strip() if isinstance(v, str) else "" for v in cells]
    return [id_text(v) for v in ids.tolist()]


def id_text(v: Any) -> str:
    """A respondent ID as text: whole floats without '.0', empty for a missing cell."""
    if v is None:
        return ""
    if isinstance(v, float):
        return "" if np.isnan(v) else fmt_num(v)
    return str(v).strip()
