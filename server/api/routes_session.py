"""Signing in on a team server: ``POST /api/session`` with a personal access token answers with the person
and sets the ``scalewright_session`` cookie (HttpOnly, SameSite=Strict); ``GET`` says who is signed in;
``DELETE`` signs out. ``/api/members`` lists, adds (answering the new token once) and removes the members
of the signed-in person's workspace (adding and removing: owners). On a laptop server (no people defined)
nobody signs in."""
from __future__ import annotations

from fastapi import APIRouter, Request, Response
from fastapi.concurrency import run_in_threadpool
from pydantic import BaseModel, Field

from ..auth import SESSION_COOKIE, team_store
from .errors import ApiError
from .openapi import error_responses

router = APIRouter(tags=["session"])


class SignIn(BaseModel):
    token: str = Field(..., min_length=1, max_length=200, description="The personal access token "
                       "printed by `scalewright people add`.")


class SessionOut(BaseModel):
    """Whether this server has people (a team server), and who is signed in."""

    team: bool = Field(description="True on a team server: every request needs a personal token.")
    name: str | None = Field(None, description="The signed-in person's name.")
    workspace: str | None = Field(None, description="Their workspace.")
    role: str | None = Field(None, description="owner, analyst or viewer.")


def _out(request: Request) -> dict:
    actor = getattr(request.state, "actor", None)
    if actor is None:
        return {"team": bool(getattr(request.state, "team", False))}
    return {"team": True, "name": actor.name, "workspace": actor.workspace, "role": actor.role}


@router.get("/session", response_model=SessionOut)
def session(request: Request) -> dict:
    """Who is signed in (from the bearer token or the session cookie)."""
    return _out(request)


@router.post("/session", response_model=SessionOut, responses=error_responses(401, 409))
async def sign_in(body: SignIn, request: Request, response: Response) -> dict:
    """Sign in with a personal access token: the answer sets the session cookie."""
    from ..people import people_defined, person_for_token

    store = team_store(request)
    if store is None or not await run_in_threadpool(people_defined, store):
        raise ApiError(409, "no_people", "This server has no people defined, so nobody signs in; it is open on "
                       "this machine (and asks for the meeting token from other machines).")
    actor = await run_in_threadpool(person_for_token, store, body.token.strip())
    if actor is None:
        raise ApiError(401, "unauthorized", "This access token is not valid (mistyped, or its person was removed).")
    response.set_cookie(SESSION_COOKIE, body.token.strip(), httponly=True, samesite="strict", path="/",
                        secure=request.url.scheme == "https")
    response.headers["Cache-Control"] = "no-store"
    return {"team": True, "name": actor.name, "workspace": actor.workspace, "role": actor.role}


@router.delete("/session", status_code=204, response_model=None)
def sign_out() -> Response:
    """Sign out: the session cookie is removed."""
    out = Response(status_code=204)
    out.delete_cookie(SESSION_COOKIE, path="/", httponly=True, samesite="strict")
    return out


class MemberIn(BaseModel):
    name: str = Field(..., min_length=1, max_length=80, description="The new member's name.")
    role: str = Field(..., pattern="^(owner|analyst|viewer)$", description="owner, analyst or viewer.")


class MemberOut(BaseModel):
    """A member of the signed-in person's workspace; ``token`` only in the answer that adds them."""

    name: str
    role: str
    created_at: str
    token: str | None = Field(None, description="Their personal access token, shown only once.")


def _members_store(request: Request):
    actor = getattr(request.state, "actor", None)
    if actor is None:
        raise ApiError(409, "no_people", "This server has no people defined (laptop mode), so it has no members; "
                       "add the first with `scalewright people add`.")
    return team_store(request), actor


@router.get("/members", response_model=list[MemberOut], responses=error_responses(409))
def list_members(request: Request) -> list[dict]:
    """The members of the signed-in person's workspace, by name (no tokens)."""
    from ..people import list_people

    store, actor = _members_store(request)
    return list_people(store, workspace=actor.workspace)


@router.post("/members", status_code=201, response_model=MemberOut, responses=error_responses(409))
def add_member(body: MemberIn, request: Request) -> dict:
    """Add a member to the owner's workspace; the answer carries their token, shown only this once."""
    from ..people import PeopleError, add_person

    store, actor = _members_store(request)
    try:
        person, token = add_person(store, body.name, workspace=actor.workspace, role=body.role)
    except PeopleError as exc:
        raise ApiError(409, "member_exists", str(exc), {"name": body.name}) from None
    store.audit("member_add", details={"name": person["name"], "role": person["role"]})
    return {**person, "token": token}


@router.delete("/members/{name}", status_code=204, response_model=None, responses=error_responses(404, 409))
def remove_member(name: str, request: Request) -> Response:
    """Remove a member of the owner's workspace: their token stops working at once."""
    from ..people import PeopleError, remove_person

    store, actor = _members_store(request)
    try:
        removed = remove_person(store, name, workspace=actor.workspace)
    except PeopleError as exc:
        raise ApiError(409, "last_owner", str(exc), {"name": name}) from None
    if not removed:
        raise ApiError(404, "not_found", f"Nobody called '{name}' in the workspace '{actor.workspace}'.",
                       {"member": name})
    store.audit("member_remove", details={"name": name})
    return Response(status_code=204)
