"""Snapshots: save a pruned scale with the reason for every removed item; list, read, compare, restore;
export the report, the scoring key and the kept items' responses.

The routes validate and wrap; the work (checks, trail, analysis, compare) is in ``server/snapshots.py``.
"""
from __future__ import annotations

import contextlib
from typing import Any, Literal

from fastapi import APIRouter, Request
from fastapi.responses import HTMLResponse, Response
from pydantic import BaseModel, ConfigDict, Field, ValidationError

from .. import scoring, snapshots
from ..errors import NotFound
from ..exports import responses_csv, safe_filename, scoring_key_csv
from ..report import render_report
from ..snapshots import REASON_CODES, AgreementTable, Draft, Removal
from .deps import EngineDep, StoreDep
from .errors import ApiError
from .openapi import error_responses
from .routes_agreement import AgreementRequest, RetestRequest, retest_query
from .routes_analysis import AnalysisRequest
from .routes_workspace import audit_snapshot
from .serialize import AnswerResponse, to_jsonable

router = APIRouter(tags=["snapshots"])


class RemovedIn(BaseModel):
    model_config = ConfigDict(extra="forbid")
    item: str
    reason: str | None = Field(default=None, description="Why the item went (required, free text).")
    code: str | None = Field(default=None, description="Optional code: " + ", ".join(REASON_CODES))
    alpha_after: float | None = Field(default=None, description="Ignored: the server recomputes it.")
    omega_after: float | None = Field(default=None, description="Ignored: the server recomputes it.")


class StabilityIn(BaseModel):
    model_config = ConfigDict(extra="forbid")
    retest: RetestRequest | None = Field(default=None, description="A test-retest or parallel-forms comparison "
                                         "to compute and keep: `first` is this dataset, `items` default to the "
                                         "kept items, reverse scoring to the snapshot's.")
    agreement: AgreementRequest | None = Field(default=None, description="A rater table to compute and keep.")


class SnapshotIn(BaseModel):
    model_config = ConfigDict(extra="forbid")
    name: str = Field(description="A name for the snapshot, e.g. 'After the March meeting'.")
    author: str = ""
    note: str = ""
    items: list[str] = Field(description="The kept items, in scale order.")
    removed: list[RemovedIn] = Field(default_factory=list, description="Removed items, in removal order.")
    settings: dict[str, Any] = Field(default_factory=dict, description="The analysis settings.")
    parent: str | None = Field(default=None, description="Id of the snapshot this one revises.")
    stability: StabilityIn | None = Field(default=None, description="Stability and agreement results to include.")
    resampling_run_id: str | None = Field(default=None, description="A finished resampling run of this data set "
                                          "(POST /api/datasets/{id}/resampling) whose summary the snapshot keeps.")
    scoring_method: Literal["mean", "sum"] = Field(default="mean", description="How the scoring rules score "
                                                   "each subscale: the mean or the (prorated) sum of its items.")
    min_answered_share: float = Field(default=0.8, gt=0, le=1, description="The share of a subscale's items a "
                                      "person must answer for a score (rounded up; 0.8 is common practice).")


def _draft(body: SnapshotIn, run: dict[str, Any] | None = None) -> Draft:
    stab = body.stability
    return Draft(name=body.name, items=list(body.items), author=body.author, note=body.note,
                 removed=[Removal(item=r.item, reason=r.reason, code=r.code) for r in body.removed],
                 settings={k: v for k, v in body.settings.items() if k != "items"}, parent=body.parent,
                 retest=retest_query(stab.retest) if stab is not None and stab.retest is not None else None,
                 agreement=AgreementTable(stab.agreement.ratings, stab.agreement.level)
                 if stab is not None and stab.agreement is not None else None,
                 resampling_run_id=body.resampling_run_id, resampling_run=run,
                 scoring_method=body.scoring_method, min_answered_share=body.min_answered_share)


def analysis_payload(settings: dict[str, Any]) -> dict[str, Any]:
    """Check the settings exactly as ``POST /api/datasets/{id}/analysis`` does; the payload it hands the engine."""
    given = {k: v for k, v in settings.items() if k != "items"}
    try:
        model = AnalysisRequest.model_validate(given)
    except ValidationError as exc:
        problems = []
        for e in exc.errors():
            where = ".".join(str(p) for p in e.get("loc", ()))
            problems.append(f"settings.{where}: {e.get('msg')}" if where else f"settings: {e.get('msg')}")
        raise ApiError(422, "bad_settings", "The analysis settings are not valid: " + "; ".join(problems),
                       {"problems": problems}) from None
    payload = model.model_dump(exclude_unset=False)
    if payload.get("seed") is None:
        payload.pop("seed")
    return payload


@router.post("/datasets/{dataset_id}/snapshots", status_code=201)
def save_snapshot(dataset_id: str, body: SnapshotIn, request: Request, engine: EngineDep,
                  store: StoreDep) -> AnswerResponse:
    """Save a snapshot: recompute the trail and the full analysis of the kept items, then store it."""
    run = None
    if body.resampling_run_id is not None:
        with contextlib.suppress(NotFound):  # an unknown run is refused by the service (422, not 404)
            run = request.app.state.runs.get(body.resampling_run_id).to_dict()
    stored = snapshots.save(engine, store, dataset_id, _draft(body, run), analysis_payload(body.settings), to_jsonable)
    audit_snapshot(request, "snapshot", stored, who=body.author)
    return AnswerResponse(stored, status_code=201)


@router.get("/datasets/{dataset_id}/snapshots", response_model=None)
def list_snapshots(dataset_id: str, store: StoreDep) -> list[dict[str, Any]]:
    """The data set's snapshots, newest first, without their full analyses."""
    snaps = store.list_snapshots(dataset_id)
    if not snaps and store.get_dataset(dataset_id) is None:
        raise NotFound("dataset", dataset_id)
    return [snapshots.light(s) for s in snaps]


@router.get("/snapshots/{snapshot_id}", response_model=None)
def get_snapshot(snapshot_id: str, store: StoreDep) -> dict[str, Any]:
    """One snapshot with everything stored at save time."""
    return snapshots.get(store, snapshot_id)


@router.get("/snapshots/{a}/compare/{b}")
def compare_snapshots(a: str, b: str, store: StoreDep) -> AnswerResponse:
    """What changed from snapshot ``a`` to snapshot ``b``: items, coefficients, loadings."""
    return AnswerResponse(snapshots.compare(snapshots.get(store, a), snapshots.get(store, b)))


@router.get("/snapshots/{a}/side-by-side/{b}")
def side_by_side_snapshots(a: str, b: str, store: StoreDep) -> AnswerResponse:
    """Two snapshots subscale by subscale: each form's items (wording, loading, item-rest r), each subscale's
    alpha with its interval and omega, the total, and what differs in a few sentences."""
    return AnswerResponse(snapshots.side_by_side(snapshots.get(store, a), snapshots.get(store, b)))


@router.post("/snapshots/{a}/side-by-side")
def side_by_side_current(a: str, body: AnalysisRequest, engine: EngineDep,  # type: ignore[valid-type]
                         store: StoreDep) -> AnswerResponse:
    """A snapshot beside the current view: the body is the analysis request of the current view (as for
    ``POST /api/datasets/{id}/analysis``), computed on the snapshot's data set."""
    snap = snapshots.get(store, a)
    current = snapshots.current_view(engine, store, snap["dataset_id"], body.model_dump(),  # type: ignore[attr-defined]
                                     to_jsonable)
    return AnswerResponse(snapshots.side_by_side(snap, current))


@router.get("/snapshots/{snapshot_id}/restore", response_model=None)
def restore_snapshot(snapshot_id: str, request: Request, store: StoreDep) -> dict[str, Any]:
    """The snapshot's items, settings and removal record, ready for the dashboard to load."""
    snap = snapshots.get(store, snapshot_id)
    audit_snapshot(request, "snapshot_restore", snap)
    return snapshots.restore_view(snap)


@router.get("/snapshots/{snapshot_id}/report", response_class=HTMLResponse)
def snapshot_report(snapshot_id: str, store: StoreDep) -> HTMLResponse:
    """The printable HTML report of a snapshot (no scripts, inline SVG charts)."""
    snap = snapshots.get(store, snapshot_id)
    page = render_report(snap, store.get_dataset(snap.get("dataset_id")) or {})
    filename = safe_filename(snap.get("name") or "snapshot", "report", suffix=".html")
    return HTMLResponse(page, headers={
        "Content-Disposition": f"inline; filename=\"{filename}\"",
        # The report never needs scripts or anything from elsewhere: say so to the browser too.
        "Content-Security-Policy": "default-src 'none'; style-src 'unsafe-inline'; img-src data:; "
                                   "base-uri 'none'; form-action 'none'; frame-ancestors 'none'",
    })


def _csv_response(text: str, filename: str) -> Response:
    return Response(text.encode("utf-8"), media_type="text/csv; charset=utf-8",
                    headers={"Content-Disposition": f"attachment; filename=\"{filename}\""})


@router.get("/snapshots/{snapshot_id}/scoring-key")
def snapshot_scoring_key(snapshot_id: str, engine: EngineDep, store: StoreDep) -> Response:
    """CSV of the kept items: item, text, construct, reverse, min, max."""
    snap = snapshots.get(store, snapshot_id)
    meta = snap.get("item_meta")
    if not meta:
        meta = snapshots.item_meta(engine.dataset(snap["dataset_id"]), snap.get("items") or [],
                                   (snap.get("settings") or {}).get("reverse"), to_jsonable)
    return _csv_response(scoring_key_csv(meta), safe_filename(snap.get("name") or "snapshot", "scoring-key",
                                                              suffix=".csv"))


@router.get("/snapshots/{snapshot_id}/responses", responses=error_responses(409))
def snapshot_responses(snapshot_id: str, engine: EngineDep, store: StoreDep, scored: bool = False) -> Response:
    """CSV of the kept items' responses, raw or (``?scored=true``) with reverse items scored as min+max-x."""
    snap = snapshots.get(store, snapshot_id)
    dataset_id = snap["dataset_id"]
    dataset = engine.dataset(dataset_id)  # 404 when the data set has been deleted since
    record = store.get_dataset(dataset_id) or {}
    if snap.get("dataset_sha256") and record.get("sha256") and record["sha256"] != snap["dataset_sha256"]:
        raise ApiError(409, "dataset_changed", "The data set's file no longer matches the one this snapshot was "
                       "saved from (different SHA-256).", {"snapshot": snapshot_id, "dataset": dataset_id})
    names = [m.name for m in dataset.items]
    kept = list(snap.get("items") or [])
    columns = [names.index(i) for i in kept]
    if scored:
        meta = snap.get("item_meta") or []
        reverse = [m["name"] for m in meta if m.get("reverse")] if meta else \
            (snap.get("settings") or {}).get("reverse")
        matrix = engine.scored(dataset_id, reverse)
    else:
        matrix = dataset.responses
    text = responses_csv(matrix[:, columns], kept, ids=dataset.ids, id_column=dataset.id_column)
    kind = "scored-responses" if scored else "responses"
    return _csv_response(text, safe_filename(snap.get("name") or "snapshot", kind, suffix=".csv"))



@router.get("/snapshots/{snapshot_id}/scoring-rules")
def snapshot_scoring_rules(snapshot_id: str, store: StoreDep, format: Literal["json", "csv"] = "json") -> Response:
    """How to score the scale: per subscale and for the total, the items, the reverse formula of each, the
    method (mean or sum), the minimum answered items, the score range and the reliability it rests on
    (``?format=csv``: one row per scale and item)."""
    snap = snapshots.get(store, snapshot_id)
    rules = scoring.scoring_rules(snap)
    if format == "csv":
        return _csv_response(scoring.scoring_rules_csv(rules),
                             safe_filename(snap.get("name") or "snapshot", "scoring-rules", suffix=".csv"))
    return AnswerResponse(rules)


@router.get("/snapshots/{snapshot_id}/item-statistics")
def snapshot_item_statistics(snapshot_id: str, store: StoreDep, format: Literal["json", "csv"] = "json") -> Response:
    """The snapshot's item table per subscale: descriptives, item-rest r, alpha and omega if deleted, the
    highest correlation with another subscale (``?format=csv``: one row per subscale and item)."""
    snap = snapshots.get(store, snapshot_id)
    stats = scoring.item_statistics(snap)
    if format == "csv":
        return _csv_response(scoring.item_statistics_csv(stats),
                             safe_filename(snap.get("name") or "snapshot", "item-statistics", suffix=".csv"))
    return AnswerResponse(stats)
