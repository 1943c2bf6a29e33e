"""One JSON error shape for the whole API: {"error": {"code", "message", "details"}}."""
from __future__ import annotations

import logging

from fastapi import FastAPI, Request
from fastapi.exceptions import RequestValidationError
from fastapi.responses import JSONResponse
from starlette.exceptions import HTTPException as StarletteHTTPException

from ..stats.errors import InputError

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
        code = {404: "not_found", 405: "method_not_allowed", 401: "unauthorized", 413: "too_large"}.get(
            exc.status_code, "http_error")
        return JSONResponse(error_body(code, str(exc.detail)), status_code=exc.status_code)

    @app.exception_handler(Exception)
    async def _unexpected(_: Request, exc: Exception):  # pragma: no cover - last resort
        log.exception("unexpected error")
        return JSONResponse(error_body("internal", f"Unexpected error: {type(exc).__name__}: {exc}"),
                            status_code=500)
