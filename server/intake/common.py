"""What every intake step shares: the cost limits, the wording helpers of messages, the header cleaner."""
from __future__ import annotations

import re
from collections.abc import Iterable
from dataclasses import dataclass
from typing import Any

import numpy as np

from ..stats.errors import InputError

MAX_LISTED = 5  # how many bad cells / names an error or warning lists before "and N more"
# SAS / SPSS exports write "." for system-missing; SPSS writes "#NULL!" for it when saving to Excel.
EXTRA_NA_VALUES = [".", "#NULL!"]


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
    def from_settings(cls, settings: Any) -> IntakeLimits:
        return cls(max_items=settings.max_items, max_xlsx_cells=settings.max_xlsx_cells,
                   max_unpacked_bytes=settings.max_unpacked_bytes)

    @property
    def max_columns(self) -> int | None:
        """Columns a table may have at all: 3 x max_items + 100, room for IDs, demographics and metadata."""
        return None if self.max_items is None else 3 * self.max_items + 100


# The engine re-reads datasets that were accepted at upload: a limit lowered later must not lock them out.
NO_LIMITS = IntakeLimits(max_items=None, max_xlsx_cells=None, max_unpacked_bytes=None)
DEFAULT_LIMITS = IntakeLimits()


def norm(name: str) -> str:
    """A column name in lower case, letters and digits only ('Respondent ID' -> 'respondentid')."""
    return re.sub(r"[^0-9a-z]", "", str(name).lower())


def quote_list(names: Iterable[Any], limit: int = MAX_LISTED) -> str:
    """The names quoted and joined, the first ``limit`` of them, then 'and N more'."""
    names = list(names)
    shown = ", ".join(f"'{n}'" for n in names[:limit])
    if len(names) > limit:
        shown += f" and {len(names) - limit} more"
    return shown


def fmt_num(x: float) -> str:
    """A number as a person writes it: 4, 4.5, 1e+06, inf."""
    x = float(x)
    return str(int(x)) if x.is_integer() else f"{x:g}"  # is_integer() is False for inf and nan


def plural(n: int, one: str, many: str | None = None) -> str:
    """'1 row', '3 rows'."""
    return f"{n} {one if n == 1 else (many or one + 's')}"


def first_rows(n: int) -> str:
    """'The first row', 'The first 3 rows'."""
    return "The first row" if n == 1 else f"The first {n} rows"


def is_number(text: str) -> bool:
    """Whether a cell's text reads as a number (float() accepts it)."""
    try:
        float(text)
    except ValueError:
        return False
    return True


def cell_text(v: Any) -> str:
    """A cell as text: '' for empty, whole floats without '.0', booleans as true/false."""
    if v is None:
        return ""
    if isinstance(v, float):
        if np.isnan(v):
            return ""
        return fmt_num(v)
    if isinstance(v, (bool, np.bool_)):
        return "true" if v else "false"
    return str(v).strip()


def unnamed(header: list) -> list[int]:
    """Positions of the header cells that hold no name."""
    return [j for j, h in enumerate(header)
            if h is None or (isinstance(h, float) and np.isnan(h)) or not str(h).strip().lstrip("\ufeff").strip()]


def clean_header(header: list, filename: str) -> list[str]:
    """Trimmed, unique column names; an unnamed column is called 'column N'. Raises on a repeated name."""
    names = []
    for h in header:
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


def check_width(n_columns: int, filename: str, limits: IntakeLimits, where: str = "") -> None:
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
