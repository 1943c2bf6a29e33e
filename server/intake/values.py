"""Cell values: numbers in text, non-numeric and non-finite cells, missing codes, absurd values and ranges.

Each function takes the item matrix (respondents x items, float64, NaN = missing) or one column and either
returns the cleaned values with sentences for the warnings, or raises :class:`InputError` naming the file,
column, row (1-based as in the file, the header being row 1) and value.
"""
from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np
import pandas as pd

from ..stats.errors import InputError
from .codebook import CodebookEntry
from .common import MAX_LISTED, IntakeLimits, fmt_num, plural
from .table import read_table
from .text import DECIMAL_COMMA

# Absurd answers (common practice: a screening rule in the spirit of Tukey's far-out fences, widened so
# that only typos, overflows and undeclared codes are caught): beyond ABSURD_ABS in absolute value (or
# ABSURD_SPREADS x the largest declared bound, when that is larger); for an item without a declared range,
# also farther than ABSURD_SPREADS x max(P95 - P5, 1) from the item's median.
ABSURD_ABS = 1e6
ABSURD_SPREADS = 100


@dataclass
class ColumnSummary:
    """What the checks below need of each item column, from one pass over the matrix.

    ``lo`` and ``hi`` are the smallest and largest values with NaN skipped (as ``np.fmin``/``np.fmax``; NaN
    for a column without any value), ``n_missing`` the NaN cells. Infinities count as values.
    """

    lo: np.ndarray
    hi: np.ndarray
    n_missing: np.ndarray

    @classmethod
    def of(cls, responses: np.ndarray) -> ColumnSummary:
        """The summary of a respondents x items matrix. ``min``/``max`` first (NaN propagates, so a NaN
        marks a column with a missing cell); only such columns are read again to skip the NaN and count them."""
        n, k = responses.shape
        if not n:
            return cls(np.full(k, np.nan), np.full(k, np.nan), np.zeros(k, dtype=np.int64))
        with np.errstate(invalid="ignore"):
            lo, hi = responses.min(axis=0), responses.max(axis=0)
        n_missing = np.zeros(k, dtype=np.int64)
        gaps = np.flatnonzero(np.isnan(lo) | np.isnan(hi))
        if not len(gaps):
            return cls(lo, hi, n_missing)
        if responses.flags.f_contiguous or len(gaps) < k // 4:  # column by column: each column read in one stretch
            for j in gaps:
                lo[j], hi[j], n_missing[j] = column_stats(responses[:, j])
        else:  # row-major with gaps in many columns: whole-matrix passes
            lo, hi = np.fmin.reduce(responses, axis=0), np.fmax.reduce(responses, axis=0)
            n_missing = np.isnan(responses).sum(axis=0).astype(np.int64)
        return cls(lo, hi, n_missing)

    @classmethod
    def of_columns(cls, stats: list[tuple[float, float, int]]) -> ColumnSummary:
        """The summary from each column's :func:`column_stats`, in the matrix's column order."""
        return cls(np.array([s[0] for s in stats], dtype=np.float64), np.array([s[1] for s in stats], dtype=np.float64),
                   np.array([s[2] for s in stats], dtype=np.int64))


def column_stats(v: np.ndarray) -> tuple[float, float, int]:
    """One column's (smallest, largest, missing cells), NaN skipped, as a column of :class:`ColumnSummary`."""
    if not len(v):
        return np.nan, np.nan, 0
    with np.errstate(invalid="ignore"):
        lo, hi = float(v.min()), float(v.max())  # NaN propagates: a NaN says a cell is missing
    if np.isnan(lo) or np.isnan(hi):
        return float(np.fmin.reduce(v)), float(np.fmax.reduce(v)), int(np.count_nonzero(np.isnan(v)))
    return lo, hi, 0


def numeric_mask(s: pd.Series) -> np.ndarray:
    """Which cells of a column read as numbers ('4', '4.0', '3,5')."""
    if pd.api.types.is_numeric_dtype(s.dtype):
        return s.notna().to_numpy()
    text = s.astype(str).str.strip()
    num = pd.to_numeric(text.where(~text.str.match(DECIMAL_COMMA.pattern),
                                   text.str.replace(",", ".", regex=False)), errors="coerce")
    return (num.notna() & s.notna()).to_numpy()


def parse_numbers(s: pd.Series) -> pd.Series:
    """A text-typed column read as numbers, NaN where a cell is not one; '3,5' (a decimal comma) reads as 3.5."""
    num = pd.to_numeric(s, errors="coerce")
    unparsed = s.notna().to_numpy() & ~num.notna().to_numpy()
    if unparsed.any():  # "3,5" in a comma-separated file (quoted): a decimal comma
        fixed = pd.to_numeric(s[unparsed].astype(str).str.strip().where(
            lambda t: t.str.match(DECIMAL_COMMA.pattern)).str.replace(",", ".", regex=False),
            errors="coerce")
        if fixed.notna().any():
            num = num.copy()
            num[unparsed] = fixed.to_numpy()
    return num


def refuse_non_numeric(frame: pd.DataFrame, bad: Mapping[str, np.ndarray], row_numbers: np.ndarray,
                       filename: str) -> None:
    """Raise ``non_numeric`` naming the first text cells of item columns (``bad``: column -> positions)."""
    if not bad:
        return
    cells = [{"column": c, "row": int(row_numbers[i]), "value": str(frame[c].iat[i])}
             for c, rows in bad.items() for i in rows[:MAX_LISTED]]
    counts = {c: len(rows) for c, rows in bad.items()}
    first = cells[0]
    shown = "; ".join(f"column '{b['column']}', row {b['row']}: '{b['value']}'" for b in cells[:MAX_LISTED])
    total = sum(counts.values())
    raise InputError(
        f"The file '{filename}' has {plural(total, 'non-numeric cell')} in item columns "
        f"({shown}{'; ...' if total > MAX_LISTED else ''}). Item answers must be numbers: recode these as "
        "numbers, or empty the cells that mean 'no answer' (empty cells, NA, N/A, '.' and #NULL! are read "
        "as missing; numeric codes such as -9 can be declared as missing codes).",
        code="non_numeric",
        details={"file": filename, "column": first["column"], "row": first["row"], "value": first["value"],
                 "cells": cells[:MAX_LISTED], "counts": counts})


def as_written(raw: bytes, filename: str, limits: IntakeLimits, cells: list[dict]) -> list[dict]:
    """The cells with their text as the file writes it ('1e400' rather than the 'inf' it reads as).

    Only for error messages: the file is read again as text; a cell not found keeps its number.
    """
    try:
        df, rows, _, _ = read_table(raw, filename, as_strings=True, limits=limits)
        position = {int(r): i for i, r in enumerate(rows)}
        for cell in cells:
            i = position.get(cell["row"])
            if i is not None and cell["column"] in df.columns:
                text = str(df[cell["column"]].iat[i]).strip()
                cell["value"] = text or cell["value"]
    except Exception:  # noqa: BLE001  (the message falls back to the number as read)
        return cells
    return cells


def refuse_absurd(responses: np.ndarray, item_cols: list[str], row_numbers: np.ndarray, mins: np.ndarray,
                   maxs: np.ndarray, declared: np.ndarray, raw: bytes, filename: str,
                   limits: IntakeLimits, summary: ColumnSummary | None = None) -> None:
    """Raise ``absurd_value`` naming the answers far outside any rating scale (rule: ``ABSURD_ABS``).

    A value beyond ABSURD_ABS (or ABSURD_SPREADS x the largest declared bound) in absolute value, or, for
    an item without a declared range, farther than ABSURD_SPREADS x max(P95 - P5, 1) from its median
    (common practice: a far-out fence as Tukey's, widened so only typos, overflows and codes are caught).
    Values merely outside a declared range are not absurd: they are set to missing with a warning.
    ``summary`` (:class:`ColumnSummary` of ``responses``) saves the pass over the matrix for the screen.
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
    if summary is not None:
        lo, hi = summary.lo, summary.hi
    else:
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
                usual = f"the item's range is {fmt_num(mins[j])}-{fmt_num(maxs[j])}"
            else:
                usual = f"its answers lie near {fmt_num(centre[j])}"
            cells.append({"column": item_cols[j], "row": int(row_numbers[i]), "value": fmt_num(responses[i, j]),
                          "expected": usual})
    total = sum(len(rows) for _, rows in flagged)
    cells = as_written(raw, filename, limits, cells)
    shown = "; ".join(f"column '{b['column']}', row {b['row']}: {b['value']}, where {b['expected']}" for b in cells)
    raise InputError(
        f"The file '{filename}' has {plural(total, 'absurd value')} in item columns ({shown}"
        f"{'; ...' if total > MAX_LISTED else ''}): far outside any rating scale, so probably a typo or a code. "
        "Correct these cells, declare codes such as 999 as missing codes, or remove the column if it is not an "
        "item.", code="absurd_value",
        details={"file": filename, **{key: cells[0][key] for key in ("column", "row", "value")}, "cells": cells,
                 "count": total})

def refuse_non_finite(responses: np.ndarray, items: list[str], row_numbers: np.ndarray, raw: bytes,
                      filename: str, limits: IntakeLimits, summary: ColumnSummary | None = None) -> None:
    """Raise ``non_finite_value`` naming the cells that read as infinity ('inf', '1e400').

    With ``summary`` (:class:`ColumnSummary` of ``responses``) the matrix is searched only when a column's
    smallest or largest value is infinite.
    """
    if summary is not None and not (np.isinf(summary.lo) | np.isinf(summary.hi)).any():
        return
    infinite = np.isinf(responses)
    if not infinite.any():
        return
    cols_j, rows_i = np.nonzero(infinite.T)
    cells = as_written(raw, filename, limits, [
        {"column": items[j], "row": int(row_numbers[i]), "value": fmt_num(responses[i, j])}
        for i, j in zip(rows_i[:MAX_LISTED], cols_j[:MAX_LISTED], strict=True)])
    shown = "; ".join(f"column '{b['column']}', row {b['row']}: '{b['value']}'" for b in cells)
    raise InputError(
        f"The file '{filename}' has {plural(len(rows_i), 'value')} in item columns that "
        f"{'is' if len(rows_i) == 1 else 'are'} not a finite number ({shown}"
        f"{'; ...' if len(rows_i) > MAX_LISTED else ''}): infinity, or a number too large to be represented "
        "(beyond about 1.8e308). Correct these cells or empty them.",
        code="non_finite_value", details={"file": filename, **cells[0], "cells": cells, "count": len(rows_i)})


def apply_missing_codes(responses: np.ndarray, codes: list[float], notes: list[str],
                        summary: ColumnSummary | None = None) -> int:
    """Set the cells holding a missing code (-9, 99) to NaN, in place, and say how many; returns that count.

    With ``summary`` (:class:`ColumnSummary` of ``responses``) the matrix is searched only when a code lies
    within some column's smallest and largest value.
    """
    if not codes:
        return 0
    if summary is not None:
        with np.errstate(invalid="ignore"):
            if not any(((summary.lo <= c) & (c <= summary.hi)).any() for c in codes):
                return 0
    hit = np.isin(responses, np.asarray(codes))
    n_hit = int(hit.sum())
    responses[hit] = np.nan
    if n_hit:
        notes.append(f"Missing codes {', '.join(fmt_num(c) for c in codes)} marked "
                     f"{plural(n_hit, 'cell')} as missing.")
    return n_hit


def declared_ranges(items: list[str], codebook: Mapping[str, CodebookEntry], scale_min: float | None,
                    scale_max: float | None) -> tuple[np.ndarray, np.ndarray, list[str]]:
    """(mins, maxs, source per item): the codebook's range, else the form's, else NaN and 'observed'."""
    k = len(items)
    mins = np.full(k, np.nan)
    maxs = np.full(k, np.nan)
    sources: list[str] = []
    for j, c in enumerate(items):
        e = codebook.get(c)
        if e is not None and e.min is not None:
            mins[j], maxs[j] = e.min, e.max
            sources.append("codebook")
        elif scale_min is not None:
            mins[j], maxs[j] = scale_min, scale_max
            sources.append("form")
        else:
            sources.append("observed")
    return mins, maxs, sources


def out_of_range_to_missing(responses: np.ndarray, items: list[str], row_numbers: np.ndarray, mins: np.ndarray,
                            maxs: np.ndarray, declared: np.ndarray, notes: list[str],
                            summary: ColumnSummary | None = None) -> int:
    """Set answers outside an item's declared range to NaN, in place, naming the first cells; returns how many.

    When an item's answers would fit its range after a shift (0-4 against 1-5), say so as well.
    ``summary`` (:class:`ColumnSummary` of ``responses``) saves the pass over the matrix for the screen.
    """
    if not declared.any():
        return 0
    with np.errstate(invalid="ignore"):  # a cheap screen first: no n x k temporaries when every answer fits
        if summary is not None:
            lo, hi = summary.lo, summary.hi
        else:
            lo, hi = np.fmin.reduce(responses, axis=0), np.fmax.reduce(responses, axis=0)
        if not ((lo < mins) | (hi > maxs))[declared].any():
            return 0
        outside = (responses < mins) | (responses > maxs)
    outside[:, ~declared] = False
    per_item = outside.sum(axis=0)
    if not per_item.any():
        return 0
    before = {j: responses[:, j].copy() for j in np.flatnonzero(per_item)}
    cols_j, rows_i = np.nonzero(outside.T)
    examples = "; ".join(f"column '{items[j]}', row {int(row_numbers[i])}: {fmt_num(responses[i, j])}"
                         for j, i in zip(cols_j[:MAX_LISTED], rows_i[:MAX_LISTED], strict=True))
    responses[outside] = np.nan
    listed = [f"'{items[j]}' {int(per_item[j])} (range {fmt_num(mins[j])}-{fmt_num(maxs[j])})"
              for j in np.flatnonzero(per_item)]
    shifted = []
    for j in np.flatnonzero(per_item):
        seen = before[j][~np.isnan(before[j])]
        if seen.size and seen.max() - seen.min() <= maxs[j] - mins[j] and (
                seen.min() < mins[j] or seen.max() > maxs[j]) and per_item[j] >= 0.05 * seen.size:
            shifted.append(f"'{items[j]}' ({fmt_num(seen.min())}-{fmt_num(seen.max())} against "
                           f"{fmt_num(mins[j])}-{fmt_num(maxs[j])})")
    if shifted:
        notes.append(f"The answers of {plural(len(shifted), 'item')} fit the declared range only after a "
                     f"shift: {', '.join(shifted[:10])}{' and more' if len(shifted) > 10 else ''}. The "
                     "file probably codes the answers differently (for example from 0 instead of 1); "
                     "check min and max in the codebook or scale_min and scale_max, or every analysis "
                     "runs on the answers left after the out-of-range ones were removed.")
    notes.append(f"{plural(int(per_item.sum()), 'value')} outside the item's range "
                 f"{'was' if per_item.sum() == 1 else 'were'} set to missing: "
                 f"{', '.join(listed[:10])}{' and more' if len(listed) > 10 else ''}; "
                 f"{'the cell is' if per_item.sum() == 1 else 'first cells:'} {examples}"
                 f"{'; ...' if per_item.sum() > MAX_LISTED else ''}.")
    return int(per_item.sum())
