"""Response shapes of the datasets API (documented in the OpenAPI page at /api/docs)."""
from __future__ import annotations

from pydantic import BaseModel, ConfigDict, Field


class ItemOut(BaseModel):
    """One item of a dataset as read from the file and its codebook."""

    model_config = ConfigDict(populate_by_name=True)

    name: str = Field(description="Column name in the response file.")
    text: str = Field("", description="Item wording from the codebook ('' when unknown).")
    construct_: str | None = Field(None, alias="construct",
                                   description="Construct the item was written for (codebook).")
    reverse: bool = Field(False, description="Reverse-keyed per the codebook.")
    min: float = Field(description="Lowest possible answer.")
    max: float = Field(description="Highest possible answer.")
    n_missing: int = Field(description="Missing answers after missing codes and out-of-range values.")
    range_source: str = Field("observed", description="Where min/max come from: codebook, form or observed.")


class DatasetOut(BaseModel):
    """A stored dataset: the answer of POST /api/datasets (201) and GET /api/datasets/{id}."""

    id: str
    name: str
    n_rows: int = Field(description="Respondents kept (rows with at least one item answer).")
    n_items: int
    items: list[ItemOut]
    warnings: list[str] = Field(description="Soft problems found while reading, as sentences.")
    sha256: str = Field(description="SHA-256 of the response file exactly as uploaded.")
    id_column: str | None = Field(description="Column used as respondent ID, if any.")
    created_at: str = Field(description="When it was added, ISO 8601 UTC.")
    filename: str
    codebook_filename: str | None = None
    size_bytes: int
    options: dict = Field(description="How the file was read: missing_codes, id_column, scale_min, scale_max.")


class ErrorDetail(BaseModel):
    """What went wrong, in words a user can act on."""

    code: str = Field(description="Short machine-readable word, e.g. not_found, bad_column, too_large.")
    message: str = Field(description="One or two sentences naming the file, column, row or value involved.")
    details: dict = Field(default_factory=dict, description="The named things as data (file, column, row...).")


class ErrorBody(BaseModel):
    """Every error the API answers (any 4xx or 5xx): {"error": {"code", "message", "details"}}."""

    error: ErrorDetail


class HealthOut(BaseModel):
    """GET /api/health."""

    status: str = Field(description="'ok' while the server answers.")
    version: str = Field(description="Scalewright's version.")
    preparing: bool = Field(False, description="Whether the server is drawing, in the background, the parallel-"
                            "analysis thresholds of the likely next drop (one item fewer); a drop asked for "
                            "now waits for them.")
