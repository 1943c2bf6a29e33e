"""Reading a units x raters file (for inter-rater agreement) with the decoding and ID rule of response files."""
from __future__ import annotations

from dataclasses import dataclass
from typing import Literal

from ..stats.notes import Note, note
from .columns import first_column_is_id
from .common import DEFAULT_LIMITS, IntakeLimits, cell_text
from .table import read_table


@dataclass(frozen=True)
class RatingsTable:
    """A units x raters table as text: one row per unit, one column per rater; ``None`` = no rating.

    ``unit_ids`` are the first column's labels when it holds unit IDs (``id_column`` names it), else ``None``.
    ``warnings`` say how the file was read (Latin-1 text, title rows, skipped sheets), code ``ratings_file``.
    """

    filename: str
    raters: list[str]
    ratings: list[list[str | None]]
    unit_ids: list[str] | None
    id_column: str | None
    warnings: tuple[Note, ...] = ()


def read_ratings(raw: bytes, filename: str, *, id_column: Literal["auto", "yes", "no"] = "auto",
                 limits: IntakeLimits = DEFAULT_LIMITS) -> RatingsTable:
    """Read a CSV/TSV/XLSX file of ratings: units in rows, raters in columns, optionally a unit-ID column first.

    Parameters
    ----------
    raw, filename
        The file's bytes and its name (used in messages and to recognise XLSX).
    id_column
        ``"yes"``: the first column holds unit IDs; ``"no"``: every column is a rater; ``"auto"``: decided
        by :func:`.columns.first_column_is_id`, the ID rules of response files.
    limits
        What a file may cost (XLSX cells, unpacked bytes).

    Returns
    -------
    RatingsTable
        The cells as trimmed text (empty cells are ``None``); the ratings are not checked here (the
        agreement statistics check them against the level of measurement).

    Notes
    -----
    Decoding, delimiter detection and title lines are those of :func:`.responses.read_responses` (UTF-8 with
    or without BOM, UTF-16 with a BOM, else Latin-1 with a warning). Raises :class:`InputError` naming the
    file for an empty or unreadable file.
    """
    filename = filename or "ratings.csv"
    df, _, notes, info = read_table(raw, filename, as_strings=True, limits=limits)
    columns = [str(c) for c in df.columns]
    use_ids = id_column == "yes" or (
        id_column == "auto" and len(columns) >= 2 and len(df) > 0
        and first_column_is_id(columns[0], df.iloc[:, 0], unnamed=columns[0] in set(info.get("unnamed", ()))))
    unit_ids = None
    if use_ids:
        unit_ids = [str(v).strip() for v in df.iloc[:, 0]]
        df = df.iloc[:, 1:]
    raters = columns[1:] if use_ids else columns
    ratings = [[cell_text(v) or None for v in row]
               for row in df.itertuples(index=False, name=None)]
    return RatingsTable(filename=filename, raters=raters, ratings=ratings, unit_ids=unit_ids,
                        id_column=columns[0] if unit_ids is not None else None,
                        warnings=tuple(note("ratings_file", text) for text in notes))
