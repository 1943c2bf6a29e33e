"""Datasets API: upload (multipart), list, read and delete response files.

``POST /api/datasets`` takes multipart form data: ``file`` (CSV, TSV or other delimited text, XLSX),
optional ``codebook`` (CSV or XLSX), and optional fields ``missing_codes`` ("-9,99"), ``id_column``,
``scale_min``, ``scale_max`` and ``name``.  It answers 201 with :class:`~server.api.schemas.DatasetOut`.
Bad files are 4xx with the one JSON error shape, naming file, column, row and value; an upload over
``settings.max_upload_bytes`` is 413 (checked from Content-Length first, and counted while reading).
File parts are written straight to ``DATA/tmp/`` as they arrive (never held in memory by the parser); the
response file is read once for parsing and then moved into the store, and the temp files are removed
whatever the outcome.
"""
from __future__ import annotations

import contextlib
import math
import os
import tempfile
from pathlib import Path, PurePath

from fastapi import APIRouter, Request, Response
from fastapi.concurrency import run_in_threadpool
from fastapi.responses import JSONResponse, PlainTextResponse
from starlette.datastructures import UploadFile
from starlette.formparsers import MultiPartException, MultiPartParser

from ..intake import IntakeLimits, read_responses
from ..stats.errors import InputError
from .errors import ApiError, not_found
from .openapi import error_responses
from .routes_workspace import audit_dataset
from .schemas import DatasetOut

router = APIRouter(tags=["datasets"])

# Room for the multipart boundaries, part headers and the small form fields around the files.
MULTIPART_SLACK = 64 * 1024


class _TooLarge(Exception):
    pass


def _too_large(limit: int, what: str = "The upload") -> ApiError:
    mb = round(limit / (1024 * 1024), 3)
    return ApiError(413, "too_large",
                    f"{what} is larger than the limit of {mb:g} MB (the server's max_upload_mb setting).",
                    {"limit_bytes": limit})


def _text_field(form, name: str) -> str | None:
    value = form.get(name)
    if value is None or isinstance(value, UploadFile):
        return None
    value = str(value).strip()
    return value or None


def _number_field(form, name: str) -> float | None:
    text = _text_field(form, name)
    if text is None:
        return None
    try:
        value = float(text.replace(",", "."))
    except ValueError:
        value = math.nan
    if not math.isfinite(value):
        raise ApiError(422, "bad_field", f"The field '{name}' must be a number; got '{text}'.",
                       {"field": name, "value": text})
    return value


def parse_missing_codes(text: str | None) -> list[float]:
    """'-9, 99' -> [-9.0, 99.0]; separators: comma, semicolon or whitespace."""
    if not text:
        return []
    codes = []
    for part in text.replace(";", ",").replace(" ", ",").split(","):
        part = part.strip()
        if not part:
            continue
        try:
            value = float(part)
        except ValueError:
            value = math.nan
        if not math.isfinite(value):
            raise ApiError(422, "bad_field", f"Missing codes must be numbers separated by commas "
                           f"(e.g. -9,99); '{part}' is not a number.", {"field": "missing_codes", "value": part})
        codes.append(value)
    return codes


class _DiskMultiPartParser(MultiPartParser):
    """Starlette's multipart parser, writing each file part to its own file in ``folder`` instead of a
    memory spool. Every path made is appended to ``made``; the caller removes them when done."""

    def __init__(self, *args, folder: Path, made: list[Path], **kw):
        super().__init__(*args, **kw)
        self._folder, self._made = folder, made
        self.opened: list = []

    def on_headers_finished(self) -> None:
        super().on_headers_finished()
        upload = self._current_part.file
        if upload is not None:
            upload.file.close()  # the SpooledTemporaryFile Starlette made (still empty)
            upload.file = tempfile.NamedTemporaryFile(  # noqa: SIM115  (closed by the form, or on error)
                dir=self._folder, prefix=".upload-", suffix=".part", delete=False)
            self._made.append(Path(upload.file.name))
            self.opened.append(upload.file)


def _upload_folder(request: Request) -> Path:
    """``DATA/tmp``: uploads in flight, on the same disk as the datasets so a stored one is renamed."""
    folder = Path(request.app.state.settings.data_dir) / "tmp"
    folder.mkdir(exist_ok=True)
    return folder


def _remove_files(paths: list[Path]) -> None:
    for path in paths:
        with contextlib.suppress(OSError):
            path.unlink(missing_ok=True)


async def _read_form(request: Request, limit: int, made: list[Path] | None = None):
    ctype = request.headers.get("content-type", "")
    if not ctype.lower().startswith("multipart/form-data"):
        raise ApiError(415, "unsupported_media_type", "Send the response file as multipart/form-data with the "
                       "field 'file' (and optionally 'codebook').", {"content_type": ctype})
    length = request.headers.get("content-length")
    if length and length.isdigit() and int(length) > limit + MULTIPART_SLACK:
        raise _too_large(limit)

    async def counted():
        total = 0
        async for chunk in request.stream():
            total += len(chunk)
            if total > limit + MULTIPART_SLACK:
                raise _TooLarge()
            yield chunk

    made = [] if made is None else made
    parser = _DiskMultiPartParser(request.headers, counted(), max_files=4, max_fields=32,
                                  folder=_upload_folder(request), made=made)
    try:
        try:
            return await parser.parse()
        except BaseException:
            for fh in parser.opened:  # the caller removes the files; close them first
                fh.close()
            raise
    except _TooLarge:
        raise _too_large(limit) from None
    except MultiPartException as exc:
        raise ApiError(400, "bad_multipart", f"The upload could not be read as multipart form data: "
                       f"{exc.message}", {}) from None


async def _file_field(form, name: str, limit: int) -> tuple[Path, str, int] | None:
    """(path of the file on disk, its cleaned name, its size in bytes), or None when the field is absent."""
    value = form.get(name)
    if not isinstance(value, UploadFile):
        return None
    filename = (PurePath((value.filename or name).replace("\\", "/")).name or name)[:255]
    await run_in_threadpool(value.file.flush)
    size = os.fstat(value.file.fileno()).st_size
    if not size and not value.filename:  # a browser sends an empty part when no file was chosen
        return None
    if size > limit:
        raise _too_large(limit, f"The file '{filename}'")
    return Path(value.file.name), filename, size


def _parse(raw: bytes, filename: str, **kw):
    try:
        return read_responses(raw, filename, **kw)
    except InputError:
        raise
    except Exception as exc:  # never a 500 for a bad file: name the file and what went wrong
        raise InputError(f"The file '{filename}' could not be read ({type(exc).__name__}: {exc}).",
                         code="unreadable_file", details={"file": filename}) from exc


def dataset_out(record: dict) -> dict:
    """The public JSON shape of a stored dataset record (DatasetOut)."""
    meta = record.get("meta") or {}
    items = meta.get("items") or []
    return {
        "id": record["id"], "name": record["name"], "n_rows": int(meta.get("n_rows", 0)),
        "n_items": len(items), "items": items, "warnings": list(meta.get("warnings") or []),
        "sha256": record["sha256"], "id_column": meta.get("id_column"), "created_at": record["created_at"],
        "filename": record["filename"], "codebook_filename": record.get("codebook_filename"),
        "size_bytes": int(record.get("size_bytes", 0)), "options": record.get("options") or {},
    }


def _forget(request: Request, dataset_id: str) -> None:
    forget = getattr(request.app.state.engine, "forget", None)
    if callable(forget):
        forget(dataset_id)


def _form_field(description: str, **schema) -> dict:
    return {"type": "string", "description": description, **schema}


BINARY = {"format": "binary", "contentMediaType": "application/octet-stream"}  # OpenAPI 3.0 and 3.1 spelling
# The upload parses multipart by hand (to count bytes as they arrive), so its body is documented here.
UPLOAD_BODY = {"requestBody": {"required": True, "content": {"multipart/form-data": {
    "schema": {"type": "object", "required": ["file"], "properties": {
        "file": _form_field("The response file: CSV, TSV or other delimited text, or XLSX.", **BINARY),
        "codebook": _form_field("Optional codebook (CSV or XLSX): item, text, construct, reverse, min, max.",
                                **BINARY),
        "missing_codes": _form_field("Answers that mean 'missing', separated by commas, e.g. '-9,99'."),
        "id_column": _form_field("Column holding the respondent ID (not an item)."),
        "scale_min": _form_field("Lowest possible answer, when the codebook does not say (a number)."),
        "scale_max": _form_field("Highest possible answer, when the codebook does not say (a number)."),
        "name": _form_field("A name for the dataset (default: the file name)."),
        "who": _form_field("Your name, for the audit log (or send the X-Scalewright-Who header)."),
    }},
    "encoding": {"file": {"contentType": "text/csv, text/plain, application/octet-stream, "
                                          "application/vnd.openxmlformats-officedocument.spreadsheetml.sheet"}},
}}}}


@router.post("/datasets", status_code=201, openapi_extra=UPLOAD_BODY,
             responses={201: {"model": DatasetOut}, **error_responses(400, 413, 415, 422)})
async def upload_dataset(request: Request) -> JSONResponse:
    """Upload a response file (and optional codebook); answers 201 with the dataset and its warnings."""
    made: list[Path] = []  # the upload's temp files: moved into the store on success, removed here anyway
    try:
        return await _upload_dataset(request, made)
    finally:
        _remove_files(made)


async def _upload_dataset(request: Request, made: list[Path]) -> JSONResponse:
    limit = request.app.state.settings.max_upload_bytes
    form = await _read_form(request, limit, made)
    try:
        upload = await _file_field(form, "file", limit)
        if upload is None:
            raise ApiError(422, "missing_file", "Choose a response file to upload (form field 'file').",
                           {"field": "file"})
        raw_path, filename, raw_size = upload
        codebook = await _file_field(form, "codebook", limit)
        cb_path, cb_name, cb_size = codebook if codebook else (None, None, 0)
        if raw_size + cb_size > limit:
            raise _too_large(limit)
        cb_raw = await run_in_threadpool(cb_path.read_bytes) if cb_path is not None else None
        if cb_raw is not None and not cb_raw.strip():  # a chosen but empty codebook is refused, not ignored
            raise ApiError(422, "empty_file", f"The codebook '{cb_name}' is empty.", {"file": cb_name})
        options = {
            "missing_codes": parse_missing_codes(_text_field(form, "missing_codes")),
            "id_column": _text_field(form, "id_column"),
            "scale_min": _number_field(form, "scale_min"),
            "scale_max": _number_field(form, "scale_max"),
        }
        name = _text_field(form, "name")
        who = _text_field(form, "who")  # for the audit log (or the X-Scalewright-Who header)
    finally:
        await form.close()

    raw = await run_in_threadpool(raw_path.read_bytes)  # the one copy in memory, dropped after parsing
    parsed = await run_in_threadpool(_parse, raw, filename, codebook_raw=cb_raw, codebook_filename=cb_name,
                                     limits=IntakeLimits.from_settings(request.app.state.settings), **options)
    del raw
    meta = parsed.meta()
    meta.pop("name", None)
    store = request.app.state.store
    record = await run_in_threadpool(
        store.add_dataset, name=(name or parsed.name)[:200], raw_path=raw_path, filename=filename,
        codebook_raw=cb_raw, codebook_filename=cb_name, options=options, meta=meta)
    _forget(request, record["id"])
    audit_dataset(request, "upload", record, who=who)
    parsed.name = record["name"]
    request.app.state.engine.prime(record["id"], parsed)  # the first analysis starts now, in the background
    return JSONResponse(dataset_out(record), status_code=201)


@router.get("/datasets", response_model=None, responses={200: {"model": list[DatasetOut]}})
def list_datasets(request: Request) -> list[dict]:
    """All datasets, newest first."""
    return [dataset_out(r) for r in request.app.state.store.list_datasets()]


@router.get("/datasets/{dataset_id}", response_model=None, responses={200: {"model": DatasetOut}})
def get_dataset(dataset_id: str, request: Request) -> dict:
    """One dataset (the same shape as the upload's answer)."""
    record = request.app.state.store.get_dataset(dataset_id)
    if record is None:
        raise not_found("dataset", dataset_id)
    return dataset_out(record)


@router.delete("/datasets/{dataset_id}", status_code=204)
def delete_dataset(dataset_id: str, request: Request) -> Response:
    """Delete a dataset and its raw files (its snapshots are kept). 404 if unknown."""
    gone = request.app.state.store.get_dataset(dataset_id)  # its name and SHA-256, for the audit log
    if not request.app.state.store.delete_dataset(dataset_id):
        raise not_found("dataset", dataset_id)
    _forget(request, dataset_id)
    audit_dataset(request, "delete", gone)
    return Response(status_code=204)


@router.post("/demo", response_model=None, responses={200: {"model": DatasetOut}})
def open_demo(request: Request) -> dict:
    """Add the invented demo datasets (both waves) if they are not there yet; answer with wave 1."""
    from ..demo import ensure_demo_loaded

    dataset_id = ensure_demo_loaded(request.app.state.store)
    return dataset_out(request.app.state.store.get_dataset(dataset_id))


@router.get("/demo/ratings", response_class=PlainTextResponse)
def demo_ratings() -> PlainTextResponse:
    """The invented rater table of the demo (units x raters CSV), for the agreement area."""
    from ..demo import DEMO_RATINGS

    return PlainTextResponse(DEMO_RATINGS.read_text(encoding="utf-8"), media_type="text/csv")
