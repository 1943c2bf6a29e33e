"""create_app(settings) -> FastAPI: routers, error handlers, static files, access token, CSP."""
from __future__ import annotations

import hmac
from contextlib import asynccontextmanager
from pathlib import Path

from fastapi import Depends, FastAPI, Request
from fastapi.responses import FileResponse, JSONResponse, Response
from starlette.middleware.gzip import GZipMiddleware

from . import __version__
from .api.errors import error_body, install_error_handlers
from .api.openapi import install_openapi
from .api.origins import refusal
from .api.schemas import HealthOut
from .settings import Settings
from .static_files import StaticCache
from .store import StorageError

STATIC_DIR = Path(__file__).resolve().parent.parent / "static"
# plotly.js's cartesian bundle (heatmap and scatter among its traces), vendored: static/vendor/plotly/README.txt
PLOTLY_DIR = STATIC_DIR / "vendor" / "plotly"
PLOTLY_JS = PLOTLY_DIR / "plotly-cartesian.min.js"
PLOTLY_VERSION = (PLOTLY_DIR / "VERSION").read_text().strip()
PLOTLY_ETAG = f'"plotly-{PLOTLY_VERSION}-{PLOTLY_JS.stat().st_size}"'

CSP = ("default-src 'self'; script-src 'self'; style-src 'self' 'unsafe-inline'; img-src 'self' data: blob:; "
       "font-src 'self' data:; connect-src 'self'; object-src 'none'; base-uri 'none'; frame-ancestors 'none'; "
       "form-action 'self'")


def _stop_runs_with(app: FastAPI) -> None:
    """At start, the live relay on a shared store; at stop, cancel the resampling runs (and terminate their worker
    processes), stop the relay and close the SQL store's connections."""
    previous = app.router.lifespan_context

    @asynccontextmanager
    async def lifespan(a):
        from .notify import start_live_relay, stop_live_relay

        await start_live_relay(a)  # the shared store: other processes' changes are kept from the start
        async with previous(a) as state:
            yield state
        stop_live_relay(a)
        a.state.runs.shutdown()
        a.state.store.close()  # the SQL store's pooled connections

    app.router.lifespan_context = lifespan


class Compression:
    """Gzip (level 1) for responses of 1 KB and more; never the live channel, never an API answer to this machine.

    The live channel (GET .../events, a text/event-stream) must not be buffered: it bypasses the gzip layer by
    its path, whatever the Starlette version's own list of excluded types. An API answer to a loopback client
    is sent as it is: its bytes never cross a network, and compressing the 1.4 MB answer of a 250-item pool
    would cost more than it saves. Static files and API answers to other machines (a server shared with
    --host and a token) are compressed; a response that already has a Content-Encoding (the pre-compressed
    plotly bundle) passes unchanged.
    """

    def __init__(self, app, minimum_size: int = 1024, compresslevel: int = 1):
        self.app = app
        self.gzip = GZipMiddleware(app, minimum_size=minimum_size, compresslevel=compresslevel)

    async def __call__(self, scope, receive, send):
        if scope["type"] != "http" or (scope["method"] == "GET" and scope["path"].endswith("/events")):
            await self.app(scope, receive, send)
            return
        client = (scope.get("client") or ("",))[0] or ""
        if scope["path"].startswith("/api/") and (client.startswith("127.") or client in ("::1", "localhost")):
            await self.app(scope, receive, send)
            return
        await self.gzip(scope, receive, send)


def create_app(settings: Settings | None = None) -> FastAPI:
    settings = settings or Settings()
    # The store checks the data folder (creates it; refuses a read-only or damaged one with StartupError).
    # No Swagger/ReDoc pages: FastAPI's load their scripts from a CDN, and no page here may reach outside.
    app = FastAPI(title="Scalewright", version=__version__, docs_url=None, redoc_url=None,
                  openapi_url="/api/openapi.json")
    app.state.settings = settings

    from .engine import Engine

    if settings.database_url:  # a database named by URL (PostgreSQL or one SQLite file), migrated at start
        from .sqlstore import SqlStore
        from .store import _ensure_writable_folder

        _ensure_writable_folder(settings.data_dir)  # uploads in flight and resampling runs stay in the folder
        app.state.store = SqlStore(settings.database_url)
    else:  # the data folder's SQLite file (server/folder_store.py), an earlier store of the folder imported
        from .folder_store import open_folder_store

        app.state.store = open_folder_store(settings.data_dir)
    app.state.engine = Engine(app.state.store, cache_bytes=settings.cache_bytes)
    from .runs import RunService
    app.state.runs = RunService(app.state.engine, settings.data_dir, workers=settings.run_workers)
    app.state.runs.warm()
    _stop_runs_with(app)
    install_error_handlers(app)

    @app.middleware("http")
    async def guard(request: Request, call_next):
        refused = refusal(request, settings)  # foreign Host (DNS rebinding) or another site's form
        if refused is not None:
            status, code, message, details = refused
            return JSONResponse(error_body(code, message, details), status_code=status,
                                headers={"X-Content-Type-Options": "nosniff", "Cache-Control": "no-store"})
        try:
            # a team server's signed-in person (server/auth.py), or 401; the page's files need to know whether
            # people are defined only when a meeting token may be asked for
            gate = await authenticate(request, pages_too=bool(settings.token))
        except StorageError as exc:  # the database cannot be read (read-only disk, server gone): 503, as a route's
            return JSONResponse(error_body(exc.code, exc.message, exc.details), status_code=exc.status,
                                headers={"Cache-Control": "no-store"})
        if gate is not None:
            return gate
        if settings.token and not request.state.team:  # laptop mode: the meeting token beyond this machine
            given = (request.headers.get("x-scalewright-token") or request.query_params.get("token")
                     or request.cookies.get("scalewright_token") or "")
            auth = request.headers.get("authorization", "")
            if auth.lower().startswith("bearer "):
                given = auth[7:].strip()
            if not hmac.compare_digest(given.encode(), settings.token.encode()):
                return JSONResponse(error_body("unauthorized", "This Scalewright server is shared on the network "
                                               "and needs its access token (printed when it started)."),
                                    status_code=401)
        response: Response = await call_next(request)
        if settings.token and request.query_params.get("token") == settings.token:
            response.set_cookie("scalewright_token", settings.token, httponly=True, samesite="strict")
        response.headers.setdefault("Content-Security-Policy", CSP)
        response.headers.setdefault("X-Content-Type-Options", "nosniff")
        response.headers.setdefault("Referrer-Policy", "no-referrer")
        return response

    from .api import (
        routes_agreement,
        routes_analysis,
        routes_confirmation,
        routes_datasets,
        routes_live,
        routes_runs,
        routes_session,
        routes_snapshots,
        routes_workspace,
    )
    from .auth import authenticate, check_access

    for module in (routes_datasets, routes_analysis, routes_snapshots, routes_agreement, routes_live,
                   routes_workspace, routes_confirmation, routes_runs, routes_session):
        app.include_router(module.router, prefix="/api", dependencies=[Depends(check_access)])

    @app.get("/api/health", response_model=HealthOut)
    async def health():  # on the event loop: no worker thread for a poll the page and the bench make often
        return {"status": "ok", "version": __version__, "preparing": app.state.engine.preparing()}

    @app.get("/vendor/plotly.min.js", include_in_schema=False)
    def plotly_js(request: Request):
        # The vendored cartesian bundle (version in the header); nothing comes from outside. Gzip-capable
        # browsers get the pre-compressed copy (0.5 MB instead of 1.5 MB); a day of cache, then a 304.
        headers = {"X-Plotly-Version": PLOTLY_VERSION, "ETag": PLOTLY_ETAG, "Vary": "Accept-Encoding",
                   "Cache-Control": "public, max-age=86400"}
        if request.headers.get("if-none-match") == PLOTLY_ETAG:
            return Response(status_code=304, headers=headers)
        packed = PLOTLY_JS.with_name(PLOTLY_JS.name + ".gz")
        if "gzip" in request.headers.get("accept-encoding", "") and packed.exists():
            return FileResponse(packed, media_type="text/javascript", headers={**headers, "Content-Encoding": "gzip"})
        return FileResponse(PLOTLY_JS, media_type="text/javascript", headers=headers)

    files = StaticCache(STATIC_DIR)  # the page's files from memory (server/static_files.py)

    @app.api_route("/", methods=["GET", "HEAD"], include_in_schema=False)
    async def index(request: Request):
        return files.response(request, "index.html")

    @app.api_route("/static/{path:path}", methods=["GET", "HEAD"], include_in_schema=False, name="static")
    async def static(path: str, request: Request):
        found = files.response(request, path)
        if found is None:
            return JSONResponse(error_body("not_found", f"There is no file static/{path}."), status_code=404)
        return found
    app.add_middleware(Compression)  # outermost: the guard's headers and refusals are compressed too
    install_openapi(app)  # every route's error answers, with the real error shape

    if settings.demo:
        from .demo import ensure_demo_loaded
        ensure_demo_loaded(app.state.store, app.state.engine)
    return app
