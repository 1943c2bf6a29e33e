"""POST /api/datasets/{id}/analysis: validate, call the engine, return its answer."""
from __future__ import annotations

from typing import Literal

from fastapi import APIRouter, Request
from pydantic import BaseModel, ConfigDict, Field

router = APIRouter(tags=["analysis"])


class AnalysisRequest(BaseModel):
    model_config = ConfigDict(extra="forbid")

    items: list[str] | None = Field(None, description="active item names (default: all)")
    reverse: list[str] | None = Field(None, description="reverse-keyed items, overriding the codebook")
    missing: Literal["pairwise", "listwise"] = "pairwise"
    correlation: Literal["pearson", "polychoric"] = "pearson"
    extraction: Literal["minres", "ml", "paf"] = "minres"
    rotation: Literal["oblimin", "promax", "geomin", "varimax", "quartimax", "none"] = "oblimin"
    gamma: float = Field(0.0, ge=-5, le=1, description="oblimin gamma (0 = quartimin)")
    n_factors: int | None = Field(None, ge=1, le=50)
    thresholds: dict[str, float] | None = None
    pa_iterations: int = Field(500, ge=10, le=5000)
    pa_variant: Literal["components", "factors"] = "components"
    seed: int | None = None


@router.post("/datasets/{dataset_id}/analysis")
def analyse(dataset_id: str, body: AnalysisRequest, request: Request):
    payload = body.model_dump(exclude_unset=False)
    if payload.get("seed") is None:
        payload.pop("seed")
    return request.app.state.engine.analyse(dataset_id, payload)
