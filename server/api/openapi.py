"""A truthful /api/openapi.json: every operation lists the error codes it can answer, with the real shape.

FastAPI documents only the success answer and a 422 in its own validation schema. ``install_openapi``
post-processes the generated document once: it adds the answers every route shares (421 foreign Host,
401 missing token, 403 another site's change, 404 unknown id in the path, 400 undecodable body,
422 invalid parameters or body, 500, 503 data folder unavailable, 507 disk full on writes) and points every
4xx/5xx at ``ErrorBody``.
Codes particular to one route (400, 409, 413, 415...) are declared on its decorator with
:func:`error_responses`.
"""
from __future__ import annotations

from fastapi import FastAPI

from .schemas import ErrorBody

ERROR_REF = {"$ref": "#/components/schemas/ErrorBody"}
WRITES = {"post", "put", "patch", "delete"}

DESCRIPTIONS = {
    400: "The request could not be read (e.g. broken multipart data).",
    401: "The server is shared on the network and the access token is missing or wrong.",
    403: "A change sent by a page of another web site (Origin or Sec-Fetch-Site).",
    404: "No such dataset or snapshot.",
    409: "The request conflicts with what is stored.",
    413: "Too large (upload, file or declared size over the server's limits).",
    415: "The body is not in the media type this route reads.",
    421: "The Host header names a host this server does not answer to (see the allowed_hosts setting).",
    422: "The request or the file is not valid; the message names the field, column, row or value.",
    429: "Too many open connections of this kind.",
    500: "Unexpected fault; the body carries an incident id, the server's log the details.",
    503: "The data folder cannot be read or written (or the server is shutting down).",
    507: "The disk holding the data folder is full; nothing was saved.",
}


def error_responses(*codes: int) -> dict:
    """``responses=`` entries for error codes particular to one route, all with the ErrorBody schema."""
    return {code: {"model": ErrorBody, "description": DESCRIPTIONS.get(code, "Error.")} for code in codes}


def _common_codes(method: str, operation: dict) -> set[int]:
    codes = {401, 421, 500, 503}
    params = operation.get("parameters") or []
    if method in WRITES:
        codes |= {403, 507}
    if any(p.get("in") == "path" for p in params):
        codes.add(404)
    if params or "requestBody" in operation:
        codes.add(422)
    if "requestBody" in operation:  # a body that cannot be decoded at all
        codes.add(400)
    return codes


def document_errors(schema: dict) -> dict:
    """Add the shared error answers to every operation of ``schema`` and use ErrorBody for all of them."""
    components = schema.setdefault("components", {}).setdefault("schemas", {})
    model = ErrorBody.model_json_schema(ref_template="#/components/schemas/{model}")
    components.update(model.pop("$defs", {}))
    components["ErrorBody"] = model
    for path_item in schema.get("paths", {}).values():
        for method, operation in path_item.items():
            if method not in {"get", "put", "post", "delete", "patch", "head", "options"}:
                continue
            responses = operation.setdefault("responses", {})
            for code in _common_codes(method, operation):
                responses.setdefault(str(code), {})
            for code, answer in responses.items():
                if code.isdigit() and int(code) >= 400:
                    answer["description"] = (answer.get("description") if answer.get("description")
                                             not in (None, "", "Validation Error") else
                                             DESCRIPTIONS.get(int(code), "Error."))
                    answer["content"] = {"application/json": {"schema": dict(ERROR_REF)}}
    text = repr(schema.get("paths"))
    for unused in ("HTTPValidationError", "ValidationError"):
        if f"#/components/schemas/{unused}'" not in text:
            components.pop(unused, None)
    return schema


def install_openapi(app: FastAPI) -> None:
    """Make ``app.openapi()`` (served at /api/openapi.json) return the post-processed document."""
    generate = app.openapi

    def openapi() -> dict:
        if app.openapi_schema is None:
            app.openapi_schema = document_errors(generate())
        return app.openapi_schema

    app.openapi = openapi
