"""Stability and agreement routes: two-wave comparison and rater agreement (issue 6).

POST /api/retest            two datasets (waves or parallel forms) matched by respondent ID
POST /api/agreement         a pasted units x raters table
POST /api/agreement/upload  the same from a CSV/TSV file (multipart ``file``, form field ``level``)
"""
from __future__ import annotations

import csv
import io
from typing import Annotated, Any, Literal

import numpy as np
import pandas as pd
from fastapi import APIRouter, File, Form, Request, UploadFile
from pydantic import BaseModel, Field

from ..intake import is_number
from ..stats.agreement import agreement_summary
from ..stats.errors import InputError
from ..stats.stability import retest
from .errors import ApiError, not_found
from .openapi import error_responses

router = APIRouter()

_ID_HEADERS = {"", "id", "ids", "unit", "units", "unit_id", "unitid", "subject", "subject_id", "case", "case_id",
               "target", "respondent", "respondent_id", "participant", "participant_id", "item", "text"}


class RetestRequest(BaseModel):
    first: str | None = Field(None, description="Dataset id of the first wave (or form); may be left out when "
                                                "`snapshot` is given (the snapshot's dataset is used).")
    second: str = Field(..., description="Dataset id of the second wave (or the parallel form).")
    items: list[str] | None = Field(None, description="Items to score; default: the snapshot's kept items, "
                                                      "else every item of the first dataset.")
    items_second: list[str] | None = Field(None, description="Parallel forms: the second form's items, paired "
                                                             "with `items` by position.")
    snapshot: str | None = Field(None, description="Snapshot id: use its kept items and reverse settings.")
    score: Literal["sum", "mean"] = Field("sum", description="Total score per respondent.")
    reverse: list[str] | None = Field(None, description="Reverse-keyed items of the first dataset, overriding "
                                                        "its codebook (and the snapshot's settings).")


class AgreementRequest(BaseModel):
    ratings: list[list[Any]] = Field(..., description="Rows = units, columns = raters; null = missing.")
    level: str = Field(..., description="nominal, ordinal, interval or ratio")


def _describe(dataset_id: str, ds) -> dict:
    return {"id": dataset_id, "name": ds.name, "id_column": ds.id_column, "n_rows": int(ds.n_rows)}


def _ids_of(dataset_id: str, ds, which: str) -> list[str]:
    if ds.ids is None:
        raise ApiError(422, "no_id_column",
                       f"The {which} dataset '{ds.name}' has no respondent ID column, so its respondents cannot be "
                       f"matched with the other wave. Upload it again naming its ID column.",
                       {"dataset": dataset_id, "which": which})
    ids = [str(i).strip() for i in ds.ids]
    seen, dups = set(), []
    for i in ids:
        if i in seen and i not in dups:
            dups.append(i)
        seen.add(i)
    if dups:
        raise ApiError(422, "duplicate_ids",
                       f"The {which} dataset '{ds.name}' has repeated respondent IDs ({', '.join(dups[:5])}"
                       f"{', ...' if len(dups) > 5 else ''}), so respondents cannot be matched one to one.",
                       {"dataset": dataset_id, "which": which, "ids": dups[:50], "count": len(dups)})
    return ids


def _missing_items(wanted: list[str], ds, dataset_id: str, which: str, code: str) -> None:
    names = {it.name for it in ds.items}
    missing = [i for i in wanted if i not in names]
    if missing:
        raise ApiError(422, code,
                       f"The {which} dataset '{ds.name}' has no item(s) {', '.join(repr(m) for m in missing[:10])}"
                       f"{', ...' if len(missing) > 10 else ''}; both waves must hold the items being compared.",
                       {"dataset": dataset_id, "which": which, "items": missing})


@router.post("/retest", responses=error_responses(404))
def post_retest(body: RetestRequest, request: Request) -> dict:
    """Test-retest or parallel-forms stability of the (pruned) scale, matched by respondent ID."""
    return compute_retest(request.app, body)


def compute_retest(app, body: RetestRequest) -> dict:
    """The answer of POST /api/retest (also stored with a snapshot that includes it)."""
    engine = app.state.engine
    first = body.first
    items = body.items
    reverse = body.reverse
    snap = None
    if body.snapshot is not None:
        snap = app.state.store.get_snapshot(body.snapshot)
        if snap is None:
            raise not_found("snapshot", body.snapshot)
        snap_ds = snap.get("dataset_id")
        if first is None:
            first = snap_ds
        elif snap_ds is not None and snap_ds != first:
            raise ApiError(422, "snapshot_mismatch",
                           f"Snapshot '{body.snapshot}' belongs to dataset '{snap_ds}', not to the first wave "
                           f"'{first}'.", {"snapshot": body.snapshot, "dataset": snap_ds, "first": first})
        if items is None:
            items = list(snap.get("items") or [])
        if reverse is None:
            reverse = (snap.get("settings") or {}).get("reverse")
    if first is None:
        raise ApiError(422, "bad_request", "Name the first wave (`first`) or a snapshot of it (`snapshot`).",
                       {"field": "first"})
    if first == body.second:
        raise ApiError(422, "same_dataset", "The first and second waves are the same dataset; pick the other wave.",
                       {"first": first, "second": body.second})
    ds1 = engine.dataset(first)
    ds2 = engine.dataset(body.second)
    names1 = [it.name for it in ds1.items]
    names2 = [it.name for it in ds2.items]
    if items is None:
        items = names1
    if not items:
        raise ApiError(422, "no_items", "No items to score.", {"field": "items"})
    if len(set(items)) != len(items):
        raise ApiError(422, "duplicate_items", "An item is named twice in `items`.", {"items": items})
    _missing_items(items, ds1, first, "first", "unknown_item")
    parallel = body.items_second is not None
    items2 = list(body.items_second) if parallel else list(items)
    if parallel:
        if not items2:
            raise ApiError(422, "no_items", "`items_second` is empty.", {"field": "items_second"})
        _missing_items(items2, ds2, body.second, "second", "unknown_item")
    else:
        _missing_items(items2, ds2, body.second, "second", "mismatched_items")
    ids1 = _ids_of(first, ds1, "first")
    ids2 = _ids_of(body.second, ds2, "second")

    # scoring: the same reverse set in both waves (taken from the first) unless these are parallel forms
    if reverse is None:
        reverse = [it.name for it in ds1.items if it.reverse]
    reverse = list(reverse)
    X1 = engine.scored(first, reverse)
    if parallel:
        X2 = engine.scored(body.second, None)
        reverse2 = [it.name for it in ds2.items if it.reverse]
    else:
        reverse2 = [r for r in reverse if r in names2]
        X2 = engine.scored(body.second, reverse2)
    warnings: list[str] = []
    if not parallel:
        meta2 = {it.name: it for it in ds2.items}
        for it in ds1.items:
            if it.name in items and it.name in meta2 and (it.min, it.max) != (meta2[it.name].min, meta2[it.name].max):
                warnings.append(f"Item '{it.name}' has range {it.min:g}-{it.max:g} in the first wave but "
                                f"{meta2[it.name].min:g}-{meta2[it.name].max:g} in the second; reverse scoring and "
                                f"totals may not be comparable.")

    pos2 = {i: r for r, i in enumerate(ids2)}
    set1 = set(ids1)
    matched = [i for i in ids1 if i in pos2]
    only_first = [i for i in ids1 if i not in pos2]
    only_second = [i for i in ids2 if i not in set1]
    if not matched:
        raise ApiError(422, "no_overlap",
                       f"No respondent ID appears in both waves ('{ds1.name}' has {len(ids1)} IDs, e.g. "
                       f"{', '.join(ids1[:3])}; '{ds2.name}' has {len(ids2)}, e.g. {', '.join(ids2[:3])}).",
                       {"n_first": len(ids1), "n_second": len(ids2), "first_examples": ids1[:5],
                        "second_examples": ids2[:5]})
    pos1 = {i: r for r, i in enumerate(ids1)}
    rows1 = [pos1[i] for i in matched]
    rows2 = [pos2[i] for i in matched]
    cols1 = [names1.index(i) for i in items]
    cols2 = [names2.index(i) for i in items2]
    A = X1[np.ix_(rows1, cols1)]
    B = X2[np.ix_(rows2, cols2)]
    result = retest(A, B, score=body.score, items=list(items), items_second=items2, ids=matched)
    if only_first or only_second:
        warnings.insert(0, f"{len(matched)} respondent(s) are in both waves; {len(only_first)} only in the first "
                           f"and {len(only_second)} only in the second are left out.")
    out = {"first": _describe(first, ds1), "second": _describe(body.second, ds2), "snapshot": body.snapshot,
           "parallel_forms": parallel, "reverse": reverse, "reverse_second": reverse2,
           "n_matched": len(matched),
           "only_first": {"count": len(only_first), "ids": only_first},
           "only_second": {"count": len(only_second), "ids": only_second}}
    out.update(result)
    out["warnings"] = warnings + result["warnings"]
    return out


@router.post("/agreement")
def post_agreement(body: AgreementRequest) -> dict:
    """Inter-rater agreement of a pasted units x raters table."""
    return agreement_summary(body.ratings, body.level)


def _cell(v: str):
    s = v.strip()
    return None if s == "" else s


def _looks_like_ids(columns: list[str], df: pd.DataFrame) -> bool:
    """Auto-detect a first column of unit IDs: an ID-like header, or distinct values that are not all numbers.

    A rater column whose every unit got a different category and some of them text is implausible, so
    distinct text values mark labels such as L01, L02, ...
    """
    if len(columns) < 2 or df.empty:
        return False
    header = columns[0].strip().lower()
    if header in _ID_HEADERS or header.startswith("unnamed"):
        return True
    values = [str(v).strip() for v in df.iloc[:, 0]]
    if any(v == "" for v in values) or len(set(values)) != len(values) or len(values) < 2:
        return False
    return not all(is_number(v) for v in values)


@router.post("/agreement/upload", responses=error_responses(413))
async def post_agreement_upload(request: Request, file: Annotated[UploadFile, File()],
                                level: Annotated[str, Form()],
                                id_column: Annotated[Literal["auto", "yes", "no"], Form()] = "auto") -> dict:
    """Inter-rater agreement from a CSV/TSV file: units in rows, raters in columns, optional unit-ID column."""
    raw = await file.read()
    limit = getattr(request.app.state.settings, "max_upload_bytes", None)
    if limit is not None and len(raw) > limit:
        raise ApiError(413, "too_large", f"The file is larger than the {limit // (1024 * 1024)} MB limit.",
                       {"file": file.filename, "size": len(raw)})
    name = file.filename or "ratings.csv"
    if not raw.strip():
        raise ApiError(422, "empty_file", f"'{name}' is empty.", {"file": name})
    try:
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError:
        try:
            text = raw.decode("cp1252")
        except UnicodeDecodeError:
            raise ApiError(422, "bad_file", f"'{name}' is not a text (CSV/TSV) file.", {"file": name}) from None
    try:
        df = pd.read_csv(io.StringIO(text), sep=None, engine="python", dtype=str, keep_default_na=False)
    except (pd.errors.ParserError, pd.errors.EmptyDataError, ValueError, TypeError, csv.Error) as exc:
        raise ApiError(422, "bad_file", f"'{name}' could not be read as a table: {exc}", {"file": name}) from None
    columns = [str(c) for c in df.columns]
    use_ids = id_column == "yes" or (id_column == "auto" and _looks_like_ids(columns, df))
    unit_ids = None
    if use_ids:
        unit_ids = [str(v).strip() for v in df.iloc[:, 0]]
        df = df.iloc[:, 1:]
        columns = columns[1:]
    ratings = [[_cell(v) for v in row] for row in df.itertuples(index=False, name=None)]
    try:
        summary = agreement_summary(ratings, level)
    except InputError as exc:  # name the file and the rater column in the message
        if isinstance(exc.details.get("column"), int):
            j = exc.details["column"] - 1
            row = exc.details.get("row")
            if 0 <= j < len(columns):
                exc.details["rater"] = columns[j]
                exc.details["file"] = name
                where = f"unit {unit_ids[row - 1]!r}" if unit_ids and row else f"row {row}"
                exc.message = f"In '{name}', column '{columns[j]}' ({where}): {exc.message}"
                exc.args = (exc.message,)
        raise
    summary["file"] = name
    summary["raters"] = columns
    summary["unit_ids"] = unit_ids
    return summary
