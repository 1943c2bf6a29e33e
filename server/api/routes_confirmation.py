"""POST /api/datasets/{id}/confirmation: explore on one half of the respondents, confirm on the other (issue 13)."""
from __future__ import annotations

from typing import Literal

from fastapi import APIRouter
from pydantic import Field

from ..confirmation import ConfirmationQuery, confirm
from .deps import EngineDep
from .routes_analysis import AnalysisRequest
from .serialize import AnswerResponse

router = APIRouter(tags=["confirmation"])


class ConfirmationRequest(AnalysisRequest):
    """The analysis settings (used for the exploration halves; ``seed`` also draws the split) and the structure."""

    structure: Literal["codebook", "exploration"] | dict[str, list[str]] = Field(
        "codebook", description="'codebook': each active item on its construct's factor; 'exploration': each "
                                "item on its primary factor in the exploration half; or {factor: [items]}.")
    split: float | None = Field(0.5, gt=0.0, lt=1.0, description="Share of the respondents in the exploration "
                                "half (seeded permutation); null: no exploration, all respondents confirm.")


@router.post("/datasets/{dataset_id}/confirmation", response_class=AnswerResponse)
def post_confirmation(dataset_id: str, body: ConfirmationRequest, engine: EngineDep) -> AnswerResponse:
    """Hold-out confirmation: exploratory analysis on one half, a confirmatory factor model on the other."""
    request = body.model_dump(exclude={"structure", "split"})
    return AnswerResponse(confirm(engine, dataset_id, ConfirmationQuery(structure=body.structure, split=body.split,
                                                                        request=request)))
