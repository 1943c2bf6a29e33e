"""Resampling runs (issue 13): start one, follow it, cancel it.

``POST /api/datasets/{id}/resampling`` answers 202 with the run; ``GET /api/runs/{id}`` gives its state,
progress and, when done, its result; ``DELETE /api/runs/{id}`` cancels an active run (200 with the run,
now ``cancelled``) or forgets a finished one (204). Progress is also sent on the dataset's live channel as
``{"action": "resampling", "run_id", "done", "total", "state"}``.
"""
from __future__ import annotations

import asyncio
from typing import Annotated

from fastapi import APIRouter, Depends, Request
from fastapi.concurrency import run_in_threadpool
from fastapi.responses import Response
from pydantic import Field, create_model

from ..runs import DEFAULT_RESAMPLES, MAX_RESAMPLES, MIN_RESAMPLES, RunService
from .openapi import error_responses
from .routes_analysis import AnalysisRequest
from .routes_live import hub_of, publish_threadsafe
from .serialize import AnswerResponse

router = APIRouter(tags=["resampling"])


def get_runs(request: Request) -> RunService:
    """The app's run service (``app.state.runs``)."""
    return request.app.state.runs


RunsDep = Annotated[RunService, Depends(get_runs)]

#: The analysis request plus how many resamples (the settings' ``seed`` also seeds the resamples).
ResamplingRequest = create_model(  # type: ignore[call-overload]
    "ResamplingRequest", __base__=AnalysisRequest,
    n_resamples=(int, Field(DEFAULT_RESAMPLES, ge=MIN_RESAMPLES, le=MAX_RESAMPLES,
                            description="Bootstrap resamples of the respondents (2 to 2,000).")))


@router.post("/datasets/{dataset_id}/resampling", status_code=202, response_class=AnswerResponse,
             responses=error_responses(404, 422))
async def start_run(dataset_id: str, body: ResamplingRequest, request: Request,  # type: ignore[valid-type]
                    runs: RunsDep) -> AnswerResponse:
    """Start a resampling run of the analysis with these settings; 202 with the run (queued or running)."""
    req = body.model_dump(exclude={"n_resamples"})  # type: ignore[attr-defined]
    hub, loop = hub_of(request), asyncio.get_running_loop()
    run = await run_in_threadpool(runs.start, dataset_id, req, n_resamples=body.n_resamples,  # type: ignore
                                  publish=lambda ds, msg: publish_threadsafe(hub, loop, ds, msg))
    return AnswerResponse(run.to_dict(), status_code=202)


@router.get("/runs/{run_id}", response_class=AnswerResponse, responses=error_responses(404))
def get_run(run_id: str, runs: RunsDep) -> AnswerResponse:
    """A run's state, progress, settings and (when done) its result."""
    return AnswerResponse(runs.get(run_id).to_dict())


@router.delete("/runs/{run_id}", response_model=None, responses=error_responses(404))
def delete_run(run_id: str, runs: RunsDep) -> Response:
    """Cancel an active run (200, the run now ``cancelled``); forget a finished one (204)."""
    if runs.delete(run_id):
        return Response(status_code=204)
    return AnswerResponse(runs.get(run_id).to_dict())  # now cancelled (read again: it may run elsewhere)
