"""Reading response files (CSV, TSV, other delimited text, XLSX), codebooks and rating tables.

:func:`read_responses` returns a :class:`ParsedDataset`: the RAW responses (not reverse-scored) as an
``n_rows x k`` float64 array with NaN for missing, one :class:`ItemMeta` per item, the respondent IDs when
an ID column exists, and a list of warnings written as sentences. :func:`read_ratings` reads a units x
raters table for the agreement statistics. Anything that makes a file unusable raises
:class:`server.stats.errors.InputError` naming the file, column, row (1-based as in the file, the header
being row 1) and value.

Modules, in the order a response file passes through them: :mod:`.text` (decoding, delimiter, title
lines) or :mod:`.xlsx` (workbook guards and reading), joined in :mod:`.table`; :mod:`.header` (extra
header rows); :mod:`.codebook`; :mod:`.columns` (column roles, each a named rule); :mod:`.values` (numbers,
missing codes, non-finite and absurd values, ranges); :mod:`.responses` (the pipeline);
:mod:`.ratings`; :mod:`.common` (limits and wording helpers). Pure computation: pandas, numpy and the
standard library; no FastAPI here.
"""
from __future__ import annotations

from .codebook import Codebook, CodebookEntry, read_codebook
from .common import NO_LIMITS, IntakeLimits, is_number
from .ratings import RatingsTable, read_ratings
from .responses import ItemMeta, ParsedDataset, read_responses

__all__ = ["NO_LIMITS", "Codebook", "CodebookEntry", "IntakeLimits", "ItemMeta", "ParsedDataset", "RatingsTable",
           "is_number", "read_codebook", "read_ratings", "read_responses"]
