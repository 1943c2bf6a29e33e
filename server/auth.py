"""Who a request acts as on a team server, and what their role lets them do.

On a SQL store with people defined (``scalewright people add``), every API request except the health check
and the sign-in (``/api/session``) carries a personal access token, as ``Authorization: Bearer TOKEN`` or
the ``scalewright_session`` cookie set by ``POST /api/session``; without one it gets 401. The person's
workspace then bounds everything the store shows (another workspace's ids are 404) and their role what
they may change (:data:`ROUTE_ROLES`; a viewer gets 403). Without people (laptop mode) nothing here
applies and the meeting token works as before.
"""
from __future__ import annotations

import json
from collections.abc import Iterator

from fastapi import Request
from fastapi.concurrency import run_in_threadpool
from fastapi.responses import JSONResponse

from .api.errors import ApiError, error_body, not_found
from .api.origins import STATE_CHANGING
from .sqlstore import ACTING, Actor, SqlStore

SESSION_COOKIE = "scalewright_session"
RANK = {"viewer": 0, "analyst": 1, "owner": 2, "server": 3}  # "server": nobody through the API

# The least role each route needs, by route name. A state-changing route (POST/PUT/PATCH/DELETE) missing
# here needs "owner"; another missing route needs "viewer". tests/store_sql/test_people_api.py fails for
# a state-changing route missing here, so each new one is placed on purpose.
ROUTE_ROLES: dict[str, str] = {
    # POSTs that compute an answer from stored data and store nothing: a viewer reads reports with them
    "analyse": "viewer", "residuals": "viewer", "side_by_side_current": "viewer", "post_retest": "viewer",
    "post_agreement": "viewer", "post_agreement_upload": "viewer", "post_confirmation": "viewer",
    # changes of the analysis: upload, drop (live messages), save, restore, resampling runs
    "upload_dataset": "analyst", "open_demo": "analyst", "save_snapshot": "analyst", "post_event": "analyst",
    "restore_snapshot": "analyst", "start_run": "analyst", "delete_run": "analyst",
    # members and deletions
    "delete_dataset": "owner", "add_member": "owner", "remove_member": "owner", "list_members": "viewer",
    # the whole store, every workspace in it: on the server's command line (scalewright backup/restore)
    "workspace_restore": "server", "workspace_backup": "server",
}
PUBLIC_ROUTES = {"session", "sign_in", "sign_out"}  # server/api/routes_session.py: no role needed
_OPEN_PATHS = ("/api/health", "/api/session")  # answered without a token on a team server
# path parameters naming a stored object, and the kind checked against the person's workspace
_ID_PARAMS = {"dataset_id": "dataset", "snapshot_id": "snapshot", "a": "snapshot", "b": "snapshot",
              "run_id": "run"}
_BODY_IDS = {"post_retest": {"first": "dataset", "second": "dataset", "snapshot": "snapshot"},
             "save_snapshot": {"parent": "snapshot", "resampling_run_id": "run"}}


def required_role(route_name: str, method: str) -> str | None:
    """The least role for a route (None: anybody, signed in or not)."""
    if route_name in PUBLIC_ROUTES:
        return None
    return ROUTE_ROLES.get(route_name, "owner" if method.upper() in STATE_CHANGING else "viewer")


def token_of(request: Request) -> str | None:
    """The personal token a request carries: ``Authorization: Bearer`` first, then the session cookie."""
    auth = request.headers.get("authorization", "")
    if auth[:7].lower() == "bearer ":
        return auth[7:].strip() or None
    return request.cookies.get(SESSION_COOKIE) or None


def team_store(request: Request) -> SqlStore | None:
    """The app's store when it can hold people (a SQL store), else None."""
    store = getattr(request.app.state, "store", None)
    return store if isinstance(store, SqlStore) else None


def _resolve(store: SqlStore, token: str | None) -> tuple[bool, Actor | None]:
    from .people import people_defined, person_for_token

    actor = person_for_token(store, token) if token else None
    return (True, actor) if actor is not None else (people_defined(store), None)


async def authenticate(request: Request, *, pages_too: bool = True) -> JSONResponse | None:
    """Set the acting person of a team-server request (``request.state.actor``, :data:`ACTING`).

    Returns a 401 answer for an API request without a valid token on a team server; None otherwise
    (``request.state.team`` says whether people are defined, so the meeting token is not asked for).
    ``pages_too=False``: a request outside ``/api/`` (the page and its static files) is let through without
    looking anybody up (nothing there is refused on a team server, and the caller does not need to know
    whether people are defined): a database query fewer for each of the page's files.
    """
    request.state.actor, request.state.team = None, False
    ACTING.set(None)
    store = team_store(request)
    if store is None or (not pages_too and not request.url.path.startswith("/api/")):
        return None
    token = token_of(request)
    if not token and store.engine.dialect.name == "sqlite":
        # laptop mode, on every API request: one indexed read of a local file in WAL mode (a reader never waits
        # for a writer), made here on the event loop; a worker thread's hop costs several times the read
        team, actor = _resolve(store, None)
    else:  # a token's check hashes it (slow on purpose); PostgreSQL is a round trip
        team, actor = await run_in_threadpool(_resolve, store, token)
    request.state.team, request.state.actor = team, actor
    if actor is not None:
        ACTING.set(actor)
        return None
    path = request.url.path
    if not team or not path.startswith("/api/") or path in _OPEN_PATHS:
        return None
    message = ("This access token is not valid (mistyped, or its person was removed)." if token else
               "This Scalewright server is a team server: sign in with your personal access token "
               "(Authorization: Bearer TOKEN, or the sign-in form on the page).")
    return JSONResponse(error_body("unauthorized", message), status_code=401,
                        headers={"WWW-Authenticate": 'Bearer realm="scalewright"', "Cache-Control": "no-store"})


def _ids(request: Request, route_name: str, body: object) -> Iterator[tuple[str, str]]:
    for param, value in request.path_params.items():
        if param in _ID_PARAMS:
            yield _ID_PARAMS[param], str(value)
    if isinstance(body, dict):
        for field, kind in _BODY_IDS.get(route_name, {}).items():
            if isinstance(body.get(field), str):
                yield kind, body[field]


def _visible(request: Request, kind: str, ident: str) -> bool:
    store = request.app.state.store  # scoped to the acting person's workspace by ACTING
    if kind == "dataset":
        return store.get_dataset(ident) is not None
    if kind == "snapshot":
        return store.get_snapshot(ident) is not None
    try:
        run = request.app.state.runs.get(ident)
    except LookupError:
        return True  # unknown run: the route answers its own 404
    return store.get_dataset(run.dataset_id) is not None


async def check_access(request: Request) -> None:
    """Router dependency: on a team server, the person's role must reach the route's (403) and every id
    the request names must be in their workspace (404, as if it did not exist)."""
    actor: Actor | None = getattr(request.state, "actor", None)
    route = request.scope.get("route")
    name = getattr(route, "name", "")
    need = required_role(name, request.method)
    if actor is None or need is None:
        return
    if need == "server":
        raise ApiError(403, "forbidden", "On a team server the whole store (every workspace) is backed up and "
                       "restored on the server's command line: scalewright backup|restore --database URL.",
                       {"role": actor.role, "needed": need, "workspace": actor.workspace})
    if RANK[actor.role] < RANK[need]:
        raise ApiError(403, "forbidden", f"{actor.name} is {actor.role} in the workspace '{actor.workspace}'; "
                       f"this needs {need} or more. Ask an owner of the workspace.",
                       {"role": actor.role, "needed": need, "workspace": actor.workspace})
    body = None
    if name in _BODY_IDS:
        try:
            body = json.loads(await request.body() or b"null")
        except ValueError:
            body = None  # the route answers the malformed body itself
    for kind, ident in _ids(request, name, body):
        if not await run_in_threadpool(_visible, request, kind, ident):
            raise not_found(kind, ident)


def signed_in_name(request: Request, typed: str = "") -> str:
    """The signed-in person's name on a team server, else the name typed on the page."""
    actor = getattr(request.state, "actor", None)
    return actor.name if actor is not None else typed
