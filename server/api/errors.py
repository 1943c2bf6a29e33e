"""One JSON error shape for the whole API: {"error": {"code", "message", "details"}}."""
from __future__ import annotations

import logging
import secrets
import sqlite3

from fastapi import FastAPI, Request
from fastapi.exceptions import RequestValidationError
from fastapi.responses import JSONResponse
from starlette.exceptions import HTTPException as StarletteHTTPException

from ..errors import NotFound
from ..stats.errors import InputError
from ..store import StorageError, storage_error

log = logging.getLogger("scalewright")


class ApiError(Exception):
    def __init__(self, status: int, code: str, message: str, details: dict | None = None):
        super().__init__(message)
        self.status, self.code, self.message, self.details = status, code, message, details or {}


def error_body(code: str, message: str, details: dict | None = None) -> dict:
    return {"error": {"code": code, "message": message, "details": details or {}}}


def not_found(kind: str, ident: str) -> ApiError:
    return ApiError(404, "not_found", f"No {kind} with id '{ident}'.", {kind: ident})


def install_error_handlers(app: FastAPI) -> None:
    @app.exception_handler(ApiError)
    async def _api(_: Request, exc: ApiError):
        return JSONResponse(error_body(exc.code, exc.message, exc.details), status_code=exc.status)

    @app.exception_handler(NotFound)
    async def _not_found(_: Request, exc: NotFound):
        return JSONResponse(error_body("not_found", exc.message, {exc.kind: exc.ident}), status_code=404)

    @app.exception_handler(InputError)
    async def _input(_: Request, exc: InputError):
        return JSONResponse(error_body(exc.code, exc.message, exc.details), status_code=exc.status)

    @app.exception_handler(RequestValidationError)
    async def _validation(_: Request, exc: RequestValidationError):
        problems = []
        for e in exc.errors():
            where = ".".join(str(p) for p in e.get("loc", ()) if p != "body")
            problems.append(f"{where}: {e.get('msg')}" if where else str(e.get("msg")))
        return JSONResponse(error_body("bad_request", "The request is not valid: " + "; ".join(problems),
                                       {"problems": problems}), status_code=422)

    @app.exception_handler(StarletteHTTPException)
    async def _http(_: Request, exc: StarletteHTTPException):
        code = {400: "bad_request", 404: "not_found", 405: "method_not_allowed", 401: "unauthorized",
                413: "too_large"}.get(exc.status_code, "http_error")
        return JSONResponse(error_body(code, str(exc.detail)), status_code=exc.status_code)

    async def _storage(_: Request, exc: Exception):
        mapped = storage_error(exc)
        if mapped is None:
            return internal_error(exc)
        log.warning("storage fault answered %s %s", mapped.status, mapped.code, exc_info=exc)
        return JSONResponse(error_body(mapped.code, mapped.message, mapped.details), status_code=mapped.status)

    for kind in (StorageError, OSError, sqlite3.Error):  # disk full 507, read-only or denied 503
        app.add_exception_handler(kind, _storage)

    @app.exception_handler(Exception)
    async def _unexpected(_: Request, exc: Exception):  # last resort
        return internal_error(exc)


INTERNAL_MESSAGE = "Something went wrong on the server; the details are in its log."


def internal_error(exc: BaseException) -> JSONResponse:
    """A 500 that names no path, traceback or exception text; the log has them under the incident id."""
    incident = secrets.token_hex(4)
    log.error("unexpected error, incident %s", incident, exc_info=(type(exc), exc, exc.__traceback__))
    return JSONResponse(error_body("internal", INTERNAL_MESSAGE, {"incident": incident}), status_code=500)
