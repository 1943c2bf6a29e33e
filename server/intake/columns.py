"""Column roles: which columns of a response file are items, which is the respondent ID, which are left out.

Each role is a named rule: a function of one :class:`Column` that returns its :class:`Role`, or ``None``
to pass the column on. :func:`classify_columns` applies :data:`COLUMN_RULES` in their order to every
column (the first rule that answers decides), then :data:`VALUE_RULES` to the item columns' numbers:

1. ``no_values``        no value at all: empty (or formulas whose results were never saved)
2. ``true_false``       a true/false column
3. ``date_typed``       read as dates
4. ``id_named``         named like an ID (``ID_NAMES``, or ending in 'id'): the first is the ID, later ones left out
5. ``metadata_named``   a demographic or survey-metadata name (``NON_ITEM_NAMES``, Qualtrics' ``Q_`` fields)
6. ``score_named``      named like a total or mean score (``SCORE_NAMES``, 'BEL_mean')
7. ``not_in_codebook``  numbers, but a codebook is given that lists neither this name nor its stem
8. ``answers``          numbers (or in the codebook, or mostly numbers): an item
9. ``dates_as_text``    text that reads as dates
10. ``answer_labels``   a few words given many times ('Strongly agree'): answers exported as labels
11. ``id_codes``        short distinct codes in every row: the ID, when none was found before
12. ``free_text``       anything else is text

then, on the item columns that the codebook does not list, in files of at least 10 rows:

13. ``row_numbers``     a first (or unnamed) column of distinct, increasing whole numbers numbers the rows
14. ``id_numbers``      a different whole number above 100 in every row: codes, not answers

A units x raters table (:mod:`.ratings`) takes its unit labels from its first column by the same ID rules
(:func:`first_column_is_id`).
"""
from __future__ import annotations

import re
import warnings as _warnings
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from functools import cached_property
from typing import Literal

import numpy as np
import pandas as pd

from ..stats.errors import InputError
from .codebook import Codebook, CodebookEntry
from .common import norm, quote_list
from .values import column_stats, parse_numbers

# Column names (lower case, letters and digits only) that identify respondents rather than items.
ID_NAMES = {
    "id", "ids", "respondent", "respondentid", "respondentno", "respondentnumber", "participant",
    "participantid", "participantno", "subject", "subjectid", "subj", "case", "caseid", "caseno",
    "casenumber", "record", "recordid", "responseid", "response", "userid", "user", "pid", "sid", "uid",
    "personid", "idno", "idnumber", "resp", "respid", "rid",
}
# In a units x raters table, the first column may also name what was rated.
UNIT_NAMES = frozenset({"unit", "units", "target", "item", "text"})
# Column names that are demographics or survey metadata, never items.
NON_ITEM_NAMES = {
    "age", "ageyears", "ageyr", "ageyrs", "agemo", "agemonths", "agey", "agem", "dob", "dateofbirth", "gender", "sex",
    "education", "edu", "income", "country", "nationality", "ethnicity",
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
_QUALTRICS_FIELDS = re.compile(
    r"q_(recaptcha|relevantid|totalduration|ballotbox|url|language|datapolicy|unanswered|straightlining)")
_SCORE_SUFFIX = re.compile(r"[_ .\-](total|sum|mean|avg|average|score|sumscore|meanscore)$")
_ID_SUFFIX = re.compile(r"(^|[ _.\-])id$")


# ------------------------------------------------------------------------------------------------ name tests

def stem(name: str) -> str:
    """An item name without its trailing number: 'Q12' -> 'q', 'belong_3' -> 'belong'."""
    return re.sub(r"[\s_.\-]*\d+$", "", str(name).strip().lower())


def named_like_id(name: str, *, also: frozenset[str] = frozenset()) -> bool:
    """Whether a column name identifies respondents: one of ``ID_NAMES`` (or ``also``), or ends in 'id'."""
    key = norm(name)
    return key in ID_NAMES or key in also or bool(_ID_SUFFIX.search(str(name).strip().lower()))


def column_kind(name: str) -> str | None:
    """What a column's name alone says it is: 'id', 'demographic', 'score', or None (perhaps an item)."""
    key = norm(name)
    lower = str(name).strip().lower()
    if named_like_id(name):
        return "id"
    if key in NON_ITEM_NAMES or _QUALTRICS_FIELDS.match(lower):  # Q_RecaptchaScore, Q_RelevantIDDuplicate
        return "demographic"
    if key in SCORE_NAMES or _SCORE_SUFFIX.search(lower):
        return "score"
    return None


# ------------------------------------------------------------------------------------------------ value tests

def looks_like_ids(values: pd.Series, n: int) -> bool:
    """Short codes, all present and all different (free-text comments are longer and have spaces)."""
    if n < 3 or not values.notna().all() or values.nunique() != n:
        return False
    text = values.astype(str).str.strip()
    return bool(text.str.len().mean() <= 32 and text.str.contains(r"\s").mean() < 0.5)


def looks_like_labels(values: pd.Series) -> bool:
    """Answers exported as their labels ('Strongly agree'): a few distinct words, each given many times."""
    text = values.dropna().astype(str).str.strip()
    text = text[text != ""]
    if len(text) < 6:
        return False
    distinct = text.nunique()
    return bool(distinct <= 11 and distinct <= len(text) / 3 and text.str.contains(r"[A-Za-z]").mean() > 0.5)


def looks_like_dates(values: pd.Series) -> bool:
    """Whether the first 20 values all hold digits and separators and all parse as dates."""
    sample = values.dropna().astype(str).head(20)
    if sample.empty or not sample.str.contains(r"\d").all():
        return False
    if not sample.str.contains(r"[-/:.]").all():
        return False
    with _warnings.catch_warnings():
        _warnings.simplefilter("ignore")
        parsed = pd.to_datetime(sample, errors="coerce", format="mixed")
    return bool(parsed.notna().all())


def numbers_the_rows(v: np.ndarray) -> bool:
    """Distinct, increasing whole numbers spanning at least the row count (1, 2, 3, ... or 101, 102, ...)."""
    n = len(v)
    return bool(n and not np.isnan(v).any() and np.all(v == np.round(v)) and np.all(np.diff(v) > 0)
                and v[-1] - v[0] >= n - 1)


def distinct_codes_above_100(v: np.ndarray, stats: tuple[float, float, int] | None = None) -> bool:
    """A different whole number in every row, some above 100 in absolute value.

    No rating scale (not even a 0-100 slider) reaches past 100, and entered as an item such a column would
    swamp every statistic. ``stats``, the column's :func:`.values.column_stats`, saves a pass for the cheap test.
    """
    n = len(v)
    if n:  # the cheap test first, without a temporary: the largest |value| is that of the smallest or largest
        lo, hi, _ = stats if stats is not None else column_stats(v)
        with np.errstate(invalid="ignore"):  # (NaN skipped; all NaN gives NaN, and NaN > 100 is False)
            if not np.fmax(abs(lo), abs(hi)) > 100:
                return False
    return bool(n and not np.isnan(v).any() and np.all(v == np.round(v)) and np.nanmax(np.abs(v)) > 100
                and len(np.unique(v)) == n)


# ------------------------------------------------------------------------------------------------ the rules

@dataclass
class Column:
    """One column under classification, with what the rules look at computed once."""

    name: str
    values: pd.Series
    in_codebook: bool = False
    outside_codebook: bool = False  # a codebook is given that lists neither this name nor its stem
    formula: bool = False           # an XLSX column of formulas without saved results
    id_taken: bool = False          # an ID column was named or found already

    @cached_property
    def kind(self) -> str | None:
        """The name's verdict (:func:`column_kind`); a column the codebook lists is never judged by name."""
        return None if self.in_codebook else column_kind(self.name)

    @property
    def numeric_typed(self) -> bool:
        return bool(pd.api.types.is_numeric_dtype(self.values.dtype))

    @cached_property
    def numbers(self) -> pd.Series:
        """The cells read as numbers (NaN where a cell is not one)."""
        return self.values if self.numeric_typed else parse_numbers(self.values)

    @cached_property
    def not_numbers(self) -> np.ndarray:
        """Positions of the filled cells that are not numbers."""
        return np.flatnonzero(self.values.notna().to_numpy() & ~self.numbers.notna().to_numpy())

    @cached_property
    def share_numbers(self) -> float:
        """Share of the filled cells that read as numbers."""
        filled = int(self.values.notna().sum())
        return (filled - len(self.not_numbers)) / filled if filled else 0.0


@dataclass(frozen=True)
class Role:
    """What a rule decided: the column is the ``id``, an ``item`` (with its numbers), or ``left_out`` (why)."""

    kind: Literal["id", "item", "left_out"]
    why: str = ""

    @staticmethod
    def left_out(why: str) -> Role:
        return Role("left_out", why)


ITEM = Role("item")
ID = Role("id")
Rule = Callable[[Column], "Role | None"]


def no_values(col: Column) -> Role | None:
    """A column without any value is empty, or holds formulas whose results were never saved (XLSX)."""
    if len(col.values) and pd.notna(col.values.iat[0]):  # a first cell filled: not empty (no pass over the column)
        return None
    if not col.values.isna().all():
        return None
    return Role.left_out("formulas whose results were never saved: open and save the workbook in a spreadsheet "
                         "program, or paste the values" if col.formula else "empty")


def true_false(col: Column) -> Role | None:
    """A column read as true/false values."""
    return Role.left_out("true/false values") if pd.api.types.is_bool_dtype(col.values.dtype) else None


def date_typed(col: Column) -> Role | None:
    """A column read as dates (an XLSX date column)."""
    return Role.left_out("dates") if pd.api.types.is_datetime64_any_dtype(col.values.dtype) else None


def id_named(col: Column) -> Role | None:
    """The first column named like an ID is the ID, numeric or text; later ones are left out."""
    if col.kind != "id":
        return None
    return Role.left_out("ID-like name") if col.id_taken else ID


def metadata_named(col: Column) -> Role | None:
    """A demographic or survey-metadata name (age, gender, StartDate, Q_RecaptchaScore)."""
    return Role.left_out("demographic or survey-metadata name") if col.kind == "demographic" else None


def score_named(col: Column) -> Role | None:
    """A name like a total or mean score (total, sum, BEL_mean)."""
    return Role.left_out("named like a total or mean score, not an item") if col.kind == "score" else None


def not_in_codebook(col: Column) -> Role | None:
    """With a codebook, a column of numbers stays an item only when it is named like the codebook's items.

    'Q21' beside a codebook of Q1..Q20 is kept; 'visits_per_month' is left out.
    """
    if col.outside_codebook and (col.numeric_typed or col.share_numbers >= 0.5):
        return Role.left_out("not in the codebook")
    return None


def answers(col: Column) -> Role | None:
    """A column of numbers, a column the codebook lists, or one mostly of numbers, is an item.

    Its cells that are not numbers are errors (named by :func:`.values.refuse_non_numeric`).
    """
    return ITEM if col.numeric_typed or col.in_codebook or col.share_numbers >= 0.5 else None


def dates_as_text(col: Column) -> Role | None:
    """Text that reads as dates ('2026-03-01 10:04')."""
    return Role.left_out("dates") if looks_like_dates(col.values) else None


def answer_labels(col: Column) -> Role | None:
    """Answers exported as their labels ('Strongly agree'): not numbers, so not an item."""
    if not looks_like_labels(col.values):
        return None
    labels = col.values.dropna().astype(str).str.strip().value_counts().index[:3].tolist()
    return Role.left_out(f"answer labels such as {quote_list(labels, 3)}, not numbers")


def id_codes(col: Column) -> Role | None:
    """Short distinct codes in every row ('R017') are the ID, when no ID was named or found before."""
    return ID if not col.id_taken and looks_like_ids(col.values, len(col.values)) else None


def free_text(col: Column) -> Role | None:
    """Anything else is text (comments, names)."""
    return Role.left_out("text")


COLUMN_RULES: tuple[Rule, ...] = (no_values, true_false, date_typed, id_named, metadata_named, score_named,
                                  not_in_codebook, answers, dates_as_text, answer_labels, id_codes, free_text)


def row_numbers(v: np.ndarray, *, first: bool, stats: tuple[float, float, int] | None = None) -> str | None:
    """A first (or unnamed) column of distinct, increasing whole numbers numbers the rows: not an item."""
    return "row numbers" if first and numbers_the_rows(v) else None


def id_numbers(v: np.ndarray, *, first: bool, stats: tuple[float, float, int] | None = None) -> str | None:
    """A different whole number above 100 in every row holds codes (IDs), not answers."""
    return "a different whole number above 100 in every row, like IDs" if distinct_codes_above_100(v, stats) else None


VALUE_RULES = (row_numbers, id_numbers)
MIN_ROWS_FOR_VALUE_RULES = 10


@dataclass
class Roles:
    """The outcome: item columns in file order with their numbers, the ID column, and the columns left out."""

    items: list[str] = field(default_factory=list)
    values: dict[str, np.ndarray] = field(default_factory=dict)
    not_numbers: dict[str, np.ndarray] = field(default_factory=dict)  # item column -> positions of text cells
    stats: dict[str, tuple[float, float, int]] = field(default_factory=dict)  # item column -> values.column_stats
    id_column: str | None = None
    left_out: list[tuple[str, str]] = field(default_factory=list)  # (column, why)

    def take_id(self, column: str, why: str) -> None:
        """``column`` is the ID when there is none yet; else it is left out for ``why``."""
        if self.id_column is None:
            self.id_column = column
        else:
            self.left_out.append((column, why))


def classify_columns(frame: pd.DataFrame, *, codebook: Codebook | None, matched: Mapping[str, CodebookEntry],
                     id_column: str | None, unnamed: set[str], formula_columns: set[str]) -> Roles:
    """Apply :data:`COLUMN_RULES` to every column (but the named ``id_column``), then :data:`VALUE_RULES`.

    ``matched`` maps a column to its codebook entry (:func:`.codebook.match_codebook`).
    """
    roles = Roles(id_column=id_column)
    cb_stems = {stem(name) for name in codebook.entries} - {""} if codebook is not None else set()
    columns = [str(c) for c in frame.columns]
    for c in columns:
        if c == id_column:
            continue
        col = Column(c, frame[c], in_codebook=c in matched, formula=c in formula_columns,
                     outside_codebook=codebook is not None and c not in matched and stem(c) not in cb_stems,
                     id_taken=roles.id_column is not None)
        role = next(r for rule in COLUMN_RULES if (r := rule(col)) is not None)
        if role.kind == "id":
            roles.id_column = c
        elif role.kind == "left_out":
            roles.left_out.append((c, role.why))
        else:
            roles.items.append(c)
            roles.values[c] = col.numbers.to_numpy(dtype=np.float64, na_value=np.nan)
            roles.stats[c] = column_stats(roles.values[c])  # once: the value rules and the item matrix read it
            if not col.numeric_typed and len(col.not_numbers):
                roles.not_numbers[c] = col.not_numbers
    n = len(frame)
    for rule in VALUE_RULES:
        for c in list(roles.items):
            if c in matched or n < MIN_ROWS_FOR_VALUE_RULES:
                continue
            why = rule(roles.values[c], first=c == columns[0] or c in unnamed, stats=roles.stats[c])
            if why is not None:
                roles.items.remove(c)
                del roles.values[c], roles.stats[c]
                roles.take_id(c, why)
    return roles


def first_column_is_id(name: str, values: pd.Series, *, unnamed: bool) -> bool:
    """Whether the first column of a units x raters table holds unit labels, by the ID rules of responses.

    An unnamed first column, or one named like an ID (``ID_NAMES``, ending in 'id', or ``UNIT_NAMES``), is
    the ID (``id_named``); else a column mostly of text holding short distinct codes in every row
    (``id_codes``); else a column of numbers numbering the rows (``row_numbers``, from 10 rows). Empty
    cells count as missing.
    """
    if unnamed or named_like_id(name, also=UNIT_NAMES):
        return True
    if not pd.api.types.is_numeric_dtype(values.dtype):
        values = values.mask(values.astype(str).str.strip() == "")
    col = Column(name, values)
    if col.share_numbers < 0.5:
        return id_codes(col) is not None
    if len(values) < MIN_ROWS_FOR_VALUE_RULES or len(col.not_numbers):
        return False
    return row_numbers(col.numbers.to_numpy(dtype=np.float64, na_value=np.nan), first=True) is not None


def named_id_column(id_column: str | None, columns: list[str], filename: str) -> str | None:
    """The ID column the user named, as the file spells it (case aside); raises when the file lacks it."""
    id_column = str(id_column).strip() if id_column is not None else None
    if not id_column or id_column in columns:
        return id_column or None
    match = [c for c in columns if c.lower() == id_column.lower()]
    if not match:
        raise InputError(f"The ID column '{id_column}' is not in '{filename}' (its columns are "
                         f"{quote_list(columns, 10)}).", code="unknown_column",
                         details={"file": filename, "column": id_column, "columns": columns[:50]})
    return match[0]
