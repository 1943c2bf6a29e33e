"""Codebooks: one row per item with its wording, construct, keying and response range."""
from __future__ import annotations

import re
from dataclasses import dataclass

import numpy as np

from ..stats.errors import InputError
from .common import DEFAULT_LIMITS, IntakeLimits, fmt_num, norm, quote_list
from .table import read_table


@dataclass(frozen=True)
class CodebookEntry:
    """One codebook row: an item's name, wording, construct, keying and range (``None`` when not given)."""

    item: str
    text: str
    construct: str | None
    reverse: bool
    min: float | None
    max: float | None


@dataclass(frozen=True)
class Codebook:
    """The entries by item name, and the warnings of reading them."""

    entries: dict[str, CodebookEntry]
    warnings: tuple[str, ...] = ()


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


def read_codebook(raw: bytes, filename: str, *, limits: IntakeLimits = DEFAULT_LIMITS) -> Codebook:
    """Read a codebook (CSV or XLSX) with columns item, text, construct, reverse, optional min and max.

    ``reverse`` accepts 1/0, yes/no, true/false, R (and +/- keying). Raises InputError naming the codebook
    file, row and value for anything it cannot use.
    """
    df, row_numbers, notes, _ = read_table(raw, filename, as_strings=True, limits=limits)
    cols: dict[str, str] = {}
    for c in df.columns:
        key = norm(c)
        for role, aliases in _CB_ALIASES.items():
            if key in aliases and role not in cols:
                cols[role] = c
                break
    guessed: list[str] = []
    for c in df.columns:
        if c in cols.values():
            continue
        key = norm(c)
        role = next((r for prefix, r in _CB_PREFIXES if key.startswith(prefix) and r not in cols), None)
        if role is not None:
            cols[role] = c
            guessed.append(f"'{c}' as {role}")
    if guessed:
        notes.append(f"Columns of the codebook '{filename}' were matched by their names: {', '.join(guessed)}.")
    if "item" not in cols:
        raise InputError(
            f"The codebook '{filename}' has no 'item' column (found {quote_list(df.columns, 10)}). It needs "
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
            raise InputError(f"The codebook '{filename}' gives min {fmt_num(lo)} and max {fmt_num(hi)} for "
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





def match_codebook(columns: list[str], codebook: Codebook | None) -> dict[str, CodebookEntry]:
    """Column -> codebook entry: names are matched exactly, then ignoring case."""
    matched: dict[str, CodebookEntry] = {}
    if codebook is None:
        return matched
    lower = {c.lower(): c for c in columns}
    for name, entry in codebook.entries.items():
        if name in columns:
            matched[name] = entry
        elif name.lower() in lower and lower[name.lower()] not in matched:
            matched[lower[name.lower()]] = entry
    return matched
