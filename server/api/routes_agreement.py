"""Stability and agreement routes: two-wave comparison and rater agreement (issue 6).

POST /api/retest            two datasets (waves or parallel forms) matched by respondent ID
POST /api/agreement         a pasted units x raters table
POST /api/agreement/upload  the same from a CSV/TSV/XLSX file (multipart ``file``, form field ``level``)
"""
from __future__ import annotations

from typing import Annotated, Any, Literal

from fastapi import APIRouter, File, Form, Request, UploadFile
from pydantic import BaseModel, Field

from ..intake import IntakeLimits, read_ratings
from ..retest import RetestQuery, compute_retest
from ..stats.agreement import agreement_summary
from ..stats.errors import InputError
from .deps import EngineDep, StoreDep
from .errors import ApiError
from .openapi import error_responses
from .serialize import AnswerResponse, to_jsonable

router = APIRouter()


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
    by_construct: bool = Field(False, description="Also return `by_construct`: the same stability block for each "
                                                  "construct of the first wave's codebook among the chosen items.")


class AgreementRequest(BaseModel):
    ratings: list[list[Any]] = Field(..., description="Rows = units, columns = raters; null = missing.")
    level: str = Field(..., description="nominal, ordinal, interval or ratio")


@router.post("/retest", responses=error_responses(404))
def post_retest(body: RetestRequest, engine: EngineDep, store: StoreDep) -> AnswerResponse:
    """Test-retest or parallel-forms stability of the (pruned) scale, matched by respondent ID."""
    return AnswerResponse(compute_retest(engine, store, retest_query(body)))


def retest_query(body: RetestRequest) -> RetestQuery:
    """The service's query from the validated request."""
    return RetestQuery(**body.model_dump())


@router.post("/agreement")
def post_agreement(body: AgreementRequest) -> AnswerResponse:
    """Inter-rater agreement of a pasted units x raters table."""
    return AnswerResponse(agreement_summary(body.ratings, body.level))


@router.post("/agreement/upload", responses=error_responses(413))
async def post_agreement_upload(request: Request, file: Annotated[UploadFile, File()],
                                level: Annotated[str, Form()],
                                id_column: Annotated[Literal["auto", "yes", "no"], Form()] = "auto") -> dict:
    """Inter-rater agreement from a CSV/TSV/XLSX file: units in rows, raters in columns, optional unit-ID column."""
    raw = await file.read()
    limit = getattr(request.app.state.settings, "max_upload_bytes", None)
    if limit is not None and len(raw) > limit:
        raise ApiError(413, "too_large", f"The file is larger than the {limit // (1024 * 1024)} MB limit.",
                       {"file": file.filename, "size": len(raw)})
    name = file.filename or "ratings.csv"
    table = read_ratings(raw, name, id_column=id_column,
                         limits=IntakeLimits.from_settings(request.app.state.settings))
    columns, unit_ids = table.raters, table.unit_ids
    try:
        summary = agreement_summary(table.ratings, level, raters=[str(c) for c in columns])
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
    # H3: the summary is a dataclass now; the file's facts are added at the edge
    answer = to_jsonable(summary)
    return {**answer, "warnings": to_jsonable(table.warnings) + answer["warnings"], "file": name, "raters": columns,
            "unit_ids": unit_ids}
