"""CSV exports of a snapshot: the scoring key and the kept items' responses.

Pure text building (numpy only, no FastAPI): the routes in ``server/api/routes_snapshots.py`` call these
and wrap the result in a download response.

Every cell that a spreadsheet could read as a formula is neutralised: text that begins with ``=``, ``+``,
``-``, ``@``, a tab or a carriage return, and is not a plain number, gets a leading single quote
(OWASP, "CSV Injection"). Numbers, including negative ones, are written as numbers.
"""
from __future__ import annotations

import csv
import io
import math
import re
import unicodedata
from collections.abc import Iterable, Sequence

import numpy as np

__all__ = [
    "FORMULA_PREFIXES",
    "format_number",
    "neutralise_cell",
    "responses_csv",
    "safe_filename",
    "scoring_key_csv",
    "write_csv",
]

#: First characters that make a spreadsheet evaluate a cell (OWASP CSV injection guidance).
FORMULA_PREFIXES = ("=", "+", "-", "@", "\t", "\r")

_NUMBER = re.compile(r"^[+-]?(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][+-]?\d+)?$")

#: Byte-order mark written at the start of every CSV so that spreadsheets read UTF-8 text correctly.
BOM = "\ufeff"


def neutralise_cell(text: str) -> str:
    """Return ``text`` made safe to open in a spreadsheet.

    Parameters
    ----------
    text : str
        A cell's text.

    Returns
    -------
    str
        ``text`` unchanged, unless it begins with one of ``= + - @``, a tab or a carriage return and is not
        a plain decimal number; then ``"'" + text``, which spreadsheets show as text instead of running it.

    References
    ----------
    OWASP Foundation. "CSV Injection". https://owasp.org/www-community/attacks/CSV_Injection

    Examples
    --------
    >>> neutralise_cell("=SUM(A1:A9)")
    "'=SUM(A1:A9)"
    >>> neutralise_cell("-3.5")
    '-3.5'
    """
    if text and text.startswith(FORMULA_PREFIXES) and not _NUMBER.match(text):
        return "'" + text
    return text


def format_number(value: float | int | None) -> str:
    """Write a number so that it reads back as the same float: integers without ``.0``, NaN as empty."""
    if value is None:
        return ""
    x = float(value)
    if math.isnan(x):
        return ""
    if math.isinf(x):
        return "inf" if x > 0 else "-inf"
    if x.is_integer() and abs(x) < 1e15:
        return str(int(x))
    return repr(x)


def _cell(value) -> str:
    if value is None:
        return ""
    if isinstance(value, (bool, np.bool_)):
        return "true" if value else "false"
    if isinstance(value, (int, float, np.integer, np.floating)):
        return format_number(value)
    return neutralise_cell(str(value))


def write_csv(header: Sequence, rows: Iterable[Sequence]) -> str:
    """Render a header and rows as CSV text (UTF-8 BOM first, ``\\r\\n`` line ends, every text cell
    neutralised against formula injection)."""
    buf = io.StringIO()
    buf.write(BOM)
    writer = csv.writer(buf, quoting=csv.QUOTE_MINIMAL, lineterminator="\r\n")
    writer.writerow([_cell(h) for h in header])
    for row in rows:
        writer.writerow([_cell(v) for v in row])
    return buf.getvalue()


SCORING_KEY_COLUMNS = ("item", "text", "construct", "reverse", "min", "max")


def scoring_key_csv(items: Sequence[dict]) -> str:
    """The scoring key of a scale as CSV: one row per kept item, in the scale's order.

    Parameters
    ----------
    items : sequence of dict
        Each with ``name`` (or ``item``), ``text``, ``construct``, ``reverse`` (bool: score as
        ``min + max - x``), ``min`` and ``max``.

    Returns
    -------
    str
        CSV with the columns ``item, text, construct, reverse, min, max``; ``reverse`` is ``true``/``false``.
    """
    rows = []
    for it in items:
        rows.append([
            it.get("name", it.get("item")),
            it.get("text") or "",
            it.get("construct") or "",
            bool(it.get("reverse")),
            it.get("min"),
            it.get("max"),
        ])
    return write_csv(SCORING_KEY_COLUMNS, rows)


def responses_csv(responses: np.ndarray, item_names: Sequence[str], *, ids: Sequence | None = None,
                  id_column: str | None = None) -> str:
    """The kept items' responses as CSV with the respondent ID column first.

    Parameters
    ----------
    responses : ndarray, shape (n_rows, k)
        Raw or reverse-scored responses; NaN (missing) is written as an empty cell.
    item_names : sequence of str
        Column names, one per column of ``responses``.
    ids : sequence, optional
        Respondent identifiers; when absent the rows are numbered from 1.
    id_column : str, optional
        Name of the ID column (default ``"row"`` when the data set had no ID column, else ``"id"``).

    Returns
    -------
    str
        CSV text.
    """
    matrix = np.asarray(responses, dtype=float)
    if matrix.ndim != 2 or matrix.shape[1] != len(item_names):
        raise ValueError(f"responses has shape {matrix.shape} but {len(item_names)} item names were given")
    if ids is None:
        ids = [str(i + 1) for i in range(matrix.shape[0])]
        id_column = id_column or "row"
    elif len(ids) != matrix.shape[0]:
        raise ValueError(f"{len(ids)} ids for {matrix.shape[0]} response rows")
    header = [id_column or "id", *item_names]
    # ids are text even when they look like numbers: keep them as given (neutralised if formula-like).
    rows = ([str(i) if i is not None else "", *row] for i, row in zip(ids, matrix.tolist()))
    return write_csv(header, rows)


def safe_filename(*parts: str, suffix: str) -> str:
    """A download filename made of ASCII letters, digits, ``-`` and ``_`` only, e.g.
    ``safe_filename("Belonging v2", "scoring-key", suffix=".csv") == "Belonging_v2-scoring-key.csv"``."""
    cleaned = []
    for part in parts:
        text = unicodedata.normalize("NFKD", str(part)).encode("ascii", "ignore").decode("ascii")
        text = re.sub(r"[^A-Za-z0-9_-]+", "_", text).strip("_-")
        if text:
            cleaned.append(text[:60])
    return ("-".join(cleaned) or "scalewright") + suffix
