"""Extra header rows: the question-text and import-ID rows that survey platforms write under the item codes."""
from __future__ import annotations

from collections.abc import Set as AbstractSet

import numpy as np
import pandas as pd

from .columns import column_kind
from .common import MAX_LISTED, plural
from .values import numeric_mask


def _mostly_text(s: pd.Series, nonnull: np.ndarray) -> bool:
    """True when the first filled cells of a text column already hold more than a tenth of its filled cells
    that are not numbers (the column cannot reach the 90 % of numbers below), without reading the rest."""
    if pd.api.types.is_numeric_dtype(s.dtype):
        return False
    total = int(nonnull.sum())
    need = total // 10 + 1  # more than 10 % of the filled cells
    if need >= total:
        return False
    upto = int(np.flatnonzero(nonnull)[need - 1]) + 1  # the first ``need`` filled cells
    head = s.iloc[:upto]
    return int((~numeric_mask(head) & nonnull[:upto]).sum()) >= need


def skip_extra_header_rows(df: pd.DataFrame, row_numbers: np.ndarray, filename: str, notes: list[str],
                           unnamed: AbstractSet[str] = frozenset()
                           ) -> tuple[pd.DataFrame, np.ndarray, dict[str, str]]:
    """Drop the extra header rows survey platforms write under the item codes.

    Qualtrics-style exports put the question text in row 2 and an import-ID row ('{"ImportId":"QID1"}')
    in row 3; other tools write one row of labels. A top row (of at most three) counts as a header row
    when, in the columns that hold numbers further down, it holds distinct text in at least half of them
    and (almost) no numbers. SurveyMonkey-style exports leave the header cells of a question's statements
    empty (a merged cell) and name the statements in row 2: those columns take their row-2 text as name.
    Returns the frame without those rows, their file row numbers, and the question text per column
    (taken from the first such row that is not an import-ID row) to use as item wording.
    """
    if len(df) < 6 or df.shape[1] < 2:
        return df, row_numbers, {}
    if sum(not pd.api.types.is_numeric_dtype(t) for t in df.dtypes) < 2:
        return df, row_numbers, {}  # header text sits in text-typed columns: at least 2 are needed below
    top = min(3, len(df) - 3)
    below = df.iloc[3:]
    numeric_cols = []
    for c in df.columns:
        s = below[c]
        nonnull = s.notna().to_numpy()
        if nonnull.sum() >= 3 and not _mostly_text(s, nonnull) and numeric_mask(s)[nonnull].mean() >= 0.9:
            numeric_cols.append(c)
    if len(numeric_cols) < 2:
        return df, row_numbers, {}
    n_head = 0
    for i in range(top):
        cells = df[numeric_cols].iloc[i]
        isnum = numeric_mask(cells)
        texts = [str(v).strip() for v, num in zip(cells, isnum, strict=True) if pd.notna(v) and not num]
        if (len(texts) < max(2, 0.5 * len(numeric_cols)) or isnum.sum() > 0.2 * len(texts)
                or len(set(texts)) < 0.8 * len(texts)):
            break
        n_head = i + 1
    if n_head == 0:
        return df, row_numbers, {}
    header_text: dict[str, str] = {}
    for i in range(n_head):
        row = df.iloc[i]
        if sum(str(row[c]).strip().startswith("{") for c in numeric_cols) > len(numeric_cols) / 2:
            continue  # {"ImportId": "QID1"}
        for c in df.columns:
            v = row[c]
            if pd.notna(v) and not numeric_mask(pd.Series([v])).any() and str(v).strip() and c not in header_text:
                header_text[str(c)] = str(v).strip()
    skipped = [int(r) for r in row_numbers[:n_head]]
    shown_col = next((c for c in numeric_cols if column_kind(str(c)) is None), numeric_cols[0])
    example = str(df[shown_col].iloc[0]).strip()[:60]
    notes.append(f"{'Row' if n_head == 1 else 'Rows'} {' and '.join(map(str, skipped))} of '{filename}' "
                 f"{'holds' if n_head == 1 else 'hold'} text under the column names (such as '{example}' in column "
                 f"'{shown_col}'), as survey platforms export it; read as extra header "
                 f"{'row' if n_head == 1 else 'rows'}, not as respondents"
                 + ("; the question text is used as item wording where the codebook gives none." if header_text
                    else "."))
    # Merged question headers: a named column followed by unnamed ones, each with its own row-2 text.
    rename: dict[str, str] = {}
    cols = [str(c) for c in df.columns]
    for j, c in enumerate(cols):
        if c in unnamed and c in header_text:
            rename[c] = header_text[c]
            if j > 0 and cols[j - 1] not in unnamed and cols[j - 1] in header_text:
                rename.setdefault(cols[j - 1], header_text[cols[j - 1]])
    taken = set(cols) - set(rename)
    rename = {c: rename[c] for c in cols
              if c in rename and rename[c] not in taken and list(rename.values()).count(rename[c]) == 1}
    if rename:
        shown = "; ".join(f"'{c}' -> '{t}'" for c, t in list(rename.items())[:MAX_LISTED])
        notes.append(f"{plural(len(rename), 'column')} under a shared (merged) question header took "
                     f"{'its name' if len(rename) == 1 else 'their names'} from row {skipped[0]}: {shown}"
                     f"{' and more' if len(rename) > MAX_LISTED else ''}.")
        df = df.rename(columns=rename)
        header_text = {rename.get(c, c): t for c, t in header_text.items()}
    df = df.iloc[n_head:].reset_index(drop=True)
    for c in df.columns:  # the text rows made these columns text; read the answers as numbers again
        if df[c].dtype == object:
            conv = pd.to_numeric(df[c], errors="coerce")
            if conv.notna().sum() == df[c].notna().sum():
                df[c] = conv
    return df, row_numbers[n_head:], header_text

