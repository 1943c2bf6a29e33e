"""POST /api/datasets/{id}/analysis and GET /api/options: validate, call the engine, wrap its answer."""
from __future__ import annotations

import time
from typing import Any, Literal

from fastapi import APIRouter, Request
from pydantic import BaseModel, ConfigDict, Field, create_model

from ..analysis.residuals import residual_view
from ..analysis.settings import OPTIONS, AnalysisSettings, Option
from .deps import EngineDep
from .errors import ApiError
from .routes_live import run_reported
from .serialize import AnswerResponse

router = APIRouter(tags=["analysis"])


def _field(o: Option) -> tuple[Any, Any]:
    """The request field of one option: its type, range and default from ``OPTIONS`` (None: the default)."""
    if o.type == "choice":
        kind: Any = Literal[o.values]  # type: ignore[valid-type]
    else:
        kind = int if o.type == "integer" else float
    return kind | None, Field(o.default, ge=o.min, le=o.max, description=o.help)


class _RequestBase(BaseModel):
    model_config = ConfigDict(extra="forbid")

    items: list[str] | None = Field(None, description="active item names (default: all)")
    reverse: list[str] | None = Field(None, description="reverse-keyed items, overriding the codebook")
    thresholds: dict[str, float] | None = Field(None, description="flag thresholds to change (GET /api/options)")


#: The body of an analysis request: its shape, choices and ranges come from ``AnalysisSettings``' OPTIONS.
AnalysisRequest = create_model("AnalysisRequest", __base__=_RequestBase,
                               **{o.name: _field(o) for o in OPTIONS})  # type: ignore[call-overload]


@router.post("/datasets/{dataset_id}/analysis", response_class=AnswerResponse)
async def analyse(dataset_id: str, body: AnalysisRequest, engine: EngineDep,  # type: ignore[valid-type]
                  request: Request) -> AnswerResponse:
    """The analysis of the request's settings (served from the cache when asked before).

    A long one says what it computes on the dataset's live channel (``analysis_progress``, see routes_live).
    """
    req = body.model_dump()  # type: ignore[attr-defined]

    def work() -> AnswerResponse:
        started = time.perf_counter()
        answer = engine.analyse(dataset_id, req)
        computed = time.perf_counter()
        response = AnswerResponse(answer)
        # the server's own share of the request, for the browser's resource timings (the dashboard bench)
        response.headers["Server-Timing"] = (f"analysis;dur={(computed - started) * 1000:.1f}, "
                                             f"json;dur={(time.perf_counter() - computed) * 1000:.1f}")
        return response

    return await run_reported(request, dataset_id, work)


@router.post("/datasets/{dataset_id}/residuals", response_class=AnswerResponse)
def residuals(dataset_id: str, body: AnalysisRequest, engine: EngineDep) -> AnswerResponse:  # type: ignore[valid-type]
    """Residual correlations after the factor solution of the same request (the analysis is cached)."""
    answer = engine.analyse(dataset_id, body.model_dump())  # type: ignore[attr-defined]
    efa = answer.factors.efa if answer.factors is not None else None
    res = efa.result if efa is not None else None
    if res is None:
        why = (efa.withheld or {}).get("reason") if efa is not None else None
        if why is None and efa is not None and efa.warnings:
            why = efa.warnings[0].message
        raise ApiError(409, "no_factor_solution",
                       "There are no residual correlations: this analysis has no factor solution. "
                       + (why or "Keep at least three items and more respondents than items."),
                       {"dataset": dataset_id, "n_items": len(answer.items)})
    return AnswerResponse(residual_view(answer.settings, answer.factors.correlations, res))


@router.get("/options")
def options() -> dict:
    """Every analysis setting, flag threshold and display option: default, choices or range, label and help."""
    return AnalysisSettings.describe()
