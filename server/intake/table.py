"""One entry to a table of cells, whatever the file: XLSX by its zip signature or name, else delimited text."""
from __future__ import annotations

from pathlib import PurePath

import numpy as np
import pandas as pd

from ..stats.errors import InputError
from .common import DEFAULT_LIMITS, IntakeLimits
from .text import read_delimited
from .xlsx import read_xlsx


def is_xlsx(raw: bytes, filename: str) -> bool:
    """Whether the bytes are a zip (an XLSX) or the name ends in .xlsx/.xlsm."""
    return raw[:4] == b"PK\x03\x04" or PurePath(filename or "").suffix.lower() in (".xlsx", ".xlsm")


def read_table(raw: bytes, filename: str, *, as_strings: bool = False, limits: IntakeLimits = DEFAULT_LIMITS
               ) -> tuple[pd.DataFrame, np.ndarray, list[str], dict]:
    """Read a file into (frame, file row numbers, warnings, info); with ``as_strings`` every cell is text.

    Any failure is an :class:`InputError` naming the file, never another exception.
    """
    if raw is None or len(raw) == 0 or raw.isspace():  # isspace: no stripped copy of a large file
        raise InputError(f"The file '{filename}' is empty.", code="empty_file", details={"file": filename})
    try:
        if is_xlsx(raw, filename):
            return read_xlsx(raw, filename, as_strings=as_strings, limits=limits)
        return read_delimited(raw, filename, as_strings=as_strings, limits=limits)
    except InputError:
        raise
    except Exception as exc:  # a file nobody foresaw: still a message naming it, never a crash
        raise InputError(f"The file '{filename}' could not be read as a table ({type(exc).__name__}: {exc}).",
                         code="not_a_table", details={"file": filename}) from exc


