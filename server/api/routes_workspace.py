"""The audit log and the whole workspace: ``GET /api/audit``, ``GET /api/workspace/backup`` (one zip of the
data folder) and ``POST /api/workspace/restore`` (merge such a zip into the running server's folder).

Who did something is the name given on the page: the ``X-Scalewright-Who`` header (UTF-8, percent-encoded
when it is not ASCII), a ``who`` query parameter or form field, or a route's own field such as a
snapshot's ``author``. The audit log is append-only (SQL triggers) and keeps entries about deleted datasets.
"""
from __future__ import annotations

import contextlib
import logging
import os
import shutil
import tempfile
from pathlib import PurePath
from urllib.parse import unquote

from fastapi import APIRouter, Query, Request
from fastapi.concurrency import run_in_threadpool
from fastapi.responses import FileResponse, JSONResponse
from pydantic import BaseModel, Field
from starlette.background import BackgroundTask
from starlette.datastructures import UploadFile
from starlette.formparsers import MultiPartException, MultiPartParser

from ..backup import BackupError, backup_database, restore_database
from ..store import utc_now
from .errors import ApiError
from .openapi import error_responses

router = APIRouter(tags=["workspace"])
log = logging.getLogger("scalewright")

WHO_HEADER = "x-scalewright-who"
MAX_WHO = 80


class AuditEntryOut(BaseModel):
    """One entry of the audit log."""

    seq: int = Field(description="Position in the log (increasing; gives the order of events).")
    at: str = Field(description="When, ISO 8601 UTC.")
    who: str | None = Field(description="The name given on the page, if any.")
    action: str = Field(description="upload, delete, snapshot, snapshot_restore, backup, restore, schema_upgrade, "
                        "import_earlier_store.")
    dataset_id: str | None
    snapshot_id: str | None
    details: dict = Field(description="Hashes, names and counts (e.g. the dataset's sha256).")


class RestoreOut(BaseModel):
    """What a workspace import added and skipped (ids already present with the same content)."""

    mode: str
    datasets_added: list[str]
    datasets_skipped: list[str]
    snapshots_added: list[str]
    snapshots_skipped: list[str]


def who_of(request: Request, given: str | None = None) -> str | None:
    """The person's name: ``given`` (a field of the request) or the X-Scalewright-Who header or ?who=."""
    for value in (given, request.headers.get(WHO_HEADER), request.query_params.get("who")):
        if value and value.strip():
            return unquote(value.strip())[:MAX_WHO].strip() or None
    return None


def audit(request: Request, action: str, *, who: str | None = None, dataset_id: str | None = None,
          snapshot_id: str | None = None, details: dict | None = None) -> None:
    """Append to the audit log after an action has succeeded; a failing log write is logged, not raised
    (the action itself is done and its answer stays true)."""
    try:
        request.app.state.store.audit(action, who=who_of(request, who), dataset_id=dataset_id,
                                      snapshot_id=snapshot_id, details=details)
    except Exception:
        log.exception("could not append %s to the audit log", action)


def audit_dataset(request: Request, action: str, record: dict | None, who: str | None = None) -> None:
    """Audit an upload or deletion of the dataset ``record`` with its name, file name, size and SHA-256."""
    if record:
        meta = record.get("meta") or {}
        audit(request, action, who=who, dataset_id=record.get("id"), details={
            "name": record.get("name"), "filename": record.get("filename"), "sha256": record.get("sha256"),
            "codebook_filename": record.get("codebook_filename"), "codebook_sha256": record.get("codebook_sha256"),
            "size_bytes": record.get("size_bytes"), "n_rows": meta.get("n_rows"),
            "n_items": len(meta.get("items") or [])})


def audit_snapshot(request: Request, action: str, snap: dict | None, who: str | None = None) -> None:
    """Audit a snapshot save or restore with its name, items and the dataset's SHA-256."""
    if snap:
        audit(request, action, who=who, dataset_id=snap.get("dataset_id"), snapshot_id=snap.get("id"), details={
            "name": snap.get("name"), "dataset_sha256": snap.get("dataset_sha256"),
            "n_items": len(snap.get("items") or []), "removed": [r.get("item") for r in snap.get("removed") or []],
            "parent": snap.get("parent")})


@router.get("/audit", response_model=list[AuditEntryOut])
def audit_log(request: Request, dataset_id: str | None = Query(None, max_length=64, description="Only entries "
              "about this dataset."), limit: int = Query(200, ge=1, le=10_000, description="At most this many.")
              ) -> list[dict]:
    """The audit log, newest first (highest ``seq`` first)."""
    return request.app.state.store.list_audit(dataset_id=dataset_id, limit=limit)


def _unlink(path: str) -> None:
    with contextlib.suppress(OSError):
        os.unlink(path)


def _bad_backup(exc: BackupError) -> ApiError:
    return ApiError(exc.status, exc.code, exc.message, exc.details)


@router.get("/workspace/backup", response_class=FileResponse, responses={
    200: {"content": {"application/zip": {}}, "description": "The zip: database copy, raw files, manifest.json."},
    **error_responses(422)})
async def workspace_backup(request: Request) -> FileResponse:
    """Download the whole workspace as one zip (as ``scalewright backup`` writes it); audited."""
    stamp = utc_now()[:19].replace("-", "").replace(":", "").replace("T", "-")
    folder = tempfile.mkdtemp(prefix="scalewright-backup-")
    path = os.path.join(folder, f"scalewright-backup-{stamp}.zip")  # the name the audit log records
    try:
        settings = request.app.state.settings
        summary = await run_in_threadpool(backup_database, settings.store_url, path, who=who_of(request), audit=True)
    except BackupError as exc:
        shutil.rmtree(folder, ignore_errors=True)
        raise _bad_backup(exc) from None
    except BaseException:
        shutil.rmtree(folder, ignore_errors=True)
        raise
    return FileResponse(path, media_type="application/zip", filename=os.path.basename(path),
                        headers={"X-Backup-SHA256": summary["sha256"], "Cache-Control": "no-store"},
                        background=BackgroundTask(shutil.rmtree, folder, ignore_errors=True))


async def _receive_zip(request: Request, limit: int) -> tuple[str, str, str | None]:
    """Stream the multipart field ``file`` into a temp file (counting bytes); returns (path, name, who)."""
    ctype = request.headers.get("content-type", "")
    if not ctype.lower().startswith("multipart/form-data"):
        raise ApiError(415, "unsupported_media_type", "Send the backup zip as multipart/form-data in the field "
                       "'file'.", {"content_type": ctype[:100]})
    too_large = ApiError(413, "too_large", f"The backup is larger than the limit of {limit // (1024 * 1024)} MB "
                         "(the server's max_import_mb setting); restore it with `scalewright restore` instead.",
                         {"limit_bytes": limit})
    length = request.headers.get("content-length")
    if length and length.isdigit() and int(length) > limit + 64 * 1024:
        raise too_large

    class _Over(Exception):
        pass

    async def counted():
        total = 0
        async for chunk in request.stream():
            total += len(chunk)
            if total > limit + 64 * 1024:
                raise _Over()
            yield chunk

    try:
        form = await MultiPartParser(request.headers, counted(), max_files=2, max_fields=8).parse()
    except _Over:
        raise too_large from None
    except MultiPartException as exc:
        raise ApiError(400, "bad_multipart", f"The upload could not be read as multipart form data: {exc.message}",
                       {}) from None
    try:
        upload = form.get("file")
        if not isinstance(upload, UploadFile):
            raise ApiError(422, "missing_file", "Choose a backup zip to import (form field 'file').",
                           {"field": "file"})
        who = form.get("who")
        name = (PurePath((upload.filename or "").replace("\\", "/")).name or "the uploaded file")[:200]
        fd, path = tempfile.mkstemp(prefix="scalewright-import-", suffix=".zip")
        try:
            written = 0
            with os.fdopen(fd, "wb") as out:
                while chunk := await upload.read(1024 * 1024):
                    written += len(chunk)
                    if written > limit:
                        raise too_large
                    out.write(chunk)
        except BaseException:
            _unlink(path)
            raise
        return path, name, who if isinstance(who, str) else None
    finally:
        await form.close()


@router.post("/workspace/restore", response_model=RestoreOut,
             openapi_extra={"requestBody": {"required": True, "content": {"multipart/form-data": {"schema": {
                 "type": "object", "required": ["file"], "properties": {
                     "file": {"type": "string", "format": "binary", "description": "A Scalewright backup zip."},
                     "who": {"type": "string", "description": "Your name, for the audit log."}}}}}}},
             responses=error_responses(400, 409, 413, 415, 422))
async def workspace_restore(request: Request) -> JSONResponse:
    """Import a backup zip into this workspace (merge: new datasets and snapshots are added, identical ones
    skipped, the same id with other content refuses the whole import with 409); audited."""
    settings = request.app.state.settings
    limit = settings.max_import_bytes
    path, name, who = await _receive_zip(request, limit)
    try:
        result = await run_in_threadpool(restore_database, settings.store_url, path, True,
                                         who=who_of(request, who), max_bytes=limit, label=name)
    except BackupError as exc:
        raise _bad_backup(exc) from None
    finally:
        _unlink(path)
    forget = getattr(request.app.state.engine, "forget", None)
    for dataset_id in result.get("datasets_added", []):  # never serve a cached parse under a restored id
        if callable(forget):
            forget(dataset_id)
    return JSONResponse({k: result.get(k, []) for k in RestoreOut.model_fields if k != "mode"} | {"mode": "merge"})

