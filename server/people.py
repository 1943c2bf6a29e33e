"""People, their workspaces and roles, and their personal access tokens, in the SQL store (revision 0003).

A token reads ``swp_<key>_<secret>``: ``key`` (16 hex digits) finds the person's row, ``secret`` is checked
against a salted ``hashlib.scrypt`` hash (n=2**14, r=8, p=1); the token itself is never stored and is shown
once, by ``scalewright people add``. Each person is a member of one workspace, as ``owner``, ``analyst`` or
``viewer``. While no person is defined the server runs in laptop mode (no sign-in; the meeting token beyond
this machine); the first ``people add`` turns it into a team server.
"""
from __future__ import annotations

import hashlib
import hmac
import re
import secrets
import threading

import sqlalchemy as sa

from .sqlstore import Actor, SqlStore, memberships, people, workspaces
from .store import new_id, utc_now

__all__ = ["ROLES", "PeopleError", "add_person", "list_people", "people_defined", "person_for_token",
           "remove_person"]

ROLES = ("owner", "analyst", "viewer")  # most rights first
TOKEN_PREFIX = "swp_"
_TOKEN_RE = re.compile(r"^swp_([0-9a-f]{16})_([A-Za-z0-9_-]{20,100})$")
_SCRYPT = {"n": 2 ** 14, "r": 8, "p": 1, "dklen": 32}
_MAX_NAME = 80


class PeopleError(ValueError):
    """A person or workspace that cannot be added or removed as asked (the message says why)."""


def _hash(secret: str, salt: bytes) -> bytes:
    return hashlib.scrypt(secret.encode(), salt=salt, **_SCRYPT)


def _clean(value: str, what: str) -> str:
    text = " ".join(str(value).split())
    if not text or len(text) > _MAX_NAME or "\x00" in text:
        raise PeopleError(f"The {what} {value!r} is empty or longer than {_MAX_NAME} characters.")
    return text


def people_defined(store: SqlStore) -> bool:
    """Whether anybody is defined (a team server) or not (laptop mode)."""
    with store._read() as conn:
        return conn.execute(sa.select(people.c.id).limit(1)).first() is not None


def add_person(store: SqlStore, name: str, *, workspace: str, role: str) -> tuple[dict, str]:
    """Add ``name`` to ``workspace`` (created if new) as ``role``; returns (the person, the token, shown once).

    A name is unique within its workspace (PeopleError otherwise).
    """
    name, workspace = _clean(name, "name"), _clean(workspace, "workspace")
    if role not in ROLES:
        raise PeopleError(f"The role {role!r} is not one of {', '.join(ROLES)}.")
    key, secret = secrets.token_hex(8), secrets.token_urlsafe(32)
    salt = secrets.token_bytes(16)
    person = {"id": new_id(), "name": name, "workspace": workspace, "role": role, "created_at": utc_now()}
    with store._write() as conn:
        ws = conn.execute(sa.select(workspaces.c.id).where(workspaces.c.name == workspace)).first()
        if ws is None:
            ws_id = new_id()
            conn.execute(workspaces.insert().values(id=ws_id, name=workspace, created_at=person["created_at"]))
        else:
            ws_id = ws[0]
            taken = conn.execute(sa.select(people.c.id).join(memberships, memberships.c.person_id == people.c.id)
                                 .where(memberships.c.workspace_id == ws_id, people.c.name == name)).first()
            if taken is not None:
                raise PeopleError(f"{name!r} is already a member of the workspace {workspace!r}; remove them first "
                                  "to issue a new token.")
        conn.execute(people.insert().values(id=person["id"], name=name, token_key=key, token_salt=salt,
                                            token_hash=_hash(secret, salt), created_at=person["created_at"]))
        conn.execute(memberships.insert().values(person_id=person["id"], workspace_id=ws_id, role=role))
    return person, f"{TOKEN_PREFIX}{key}_{secret}"


def _people_query():
    return (sa.select(people.c.id, people.c.name, workspaces.c.name, memberships.c.role, people.c.created_at)
            .join(memberships, memberships.c.person_id == people.c.id)
            .join(workspaces, workspaces.c.id == memberships.c.workspace_id))


def list_people(store: SqlStore, *, workspace: str | None = None) -> list[dict]:
    """Everybody (or a workspace's members) with workspace and role, by workspace then name. No tokens."""
    query = _people_query().order_by(workspaces.c.name, people.c.name)
    if workspace is not None:
        query = query.where(workspaces.c.name == workspace)
    with store._read() as conn:
        rows = conn.execute(query).all()
    return [dict(zip(("id", "name", "workspace", "role", "created_at"), r)) for r in rows]


def remove_person(store: SqlStore, name: str, *, workspace: str) -> bool:
    """Remove ``name`` from ``workspace`` (their token stops working at once); False if no such member.

    The workspace's last owner cannot be removed while other members remain (PeopleError).
    """
    with store._write() as conn:
        row = conn.execute(sa.select(people.c.id, memberships.c.role, memberships.c.workspace_id)
                           .join(memberships, memberships.c.person_id == people.c.id)
                           .join(workspaces, workspaces.c.id == memberships.c.workspace_id)
                           .where(workspaces.c.name == workspace, people.c.name == name)).first()
        if row is None:
            return False
        person_id, role, ws_id = row
        if role == "owner":
            roles = [r[0] for r in conn.execute(sa.select(memberships.c.role)
                                                .where(memberships.c.workspace_id == ws_id)).all()]
            if roles.count("owner") == 1 and len(roles) > 1:
                raise PeopleError(f"{name!r} is the last owner of the workspace {workspace!r}; add another owner "
                                  "first.")
        conn.execute(memberships.delete().where(memberships.c.person_id == person_id))
        conn.execute(people.delete().where(people.c.id == person_id))
    return True


# Verified tokens, so scrypt runs once per token and process: (key, stored hash) -> SHA-256 of the token.
# The row is still read on every request, so a removed person is refused at once.
_verified: dict[tuple[str, bytes], bytes] = {}
_verified_lock = threading.Lock()


def person_for_token(store: SqlStore, token: str | None) -> Actor | None:
    """The person whose token this is (with workspace and role), or None for anything else."""
    match = _TOKEN_RE.match(token or "")
    if match is None:
        return None
    key, secret = match.groups()
    with store._read() as conn:
        row = conn.execute(sa.select(people.c.id, people.c.name, people.c.token_salt, people.c.token_hash,
                                     workspaces.c.id, workspaces.c.name, memberships.c.role)
                           .join(memberships, memberships.c.person_id == people.c.id)
                           .join(workspaces, workspaces.c.id == memberships.c.workspace_id)
                           .where(people.c.token_key == key)).first()
    if row is None:
        return None
    person_id, name, salt, stored, ws_id, ws_name, role = row
    stored = bytes(stored)
    digest = hashlib.sha256(token.encode()).digest()
    with _verified_lock:
        known = _verified.get((key, stored))
    if known is None or not hmac.compare_digest(known, digest):
        if not hmac.compare_digest(_hash(secret, bytes(salt)), stored):
            return None
        with _verified_lock:
            if len(_verified) > 10_000:
                _verified.clear()
            _verified[(key, stored)] = digest
    return Actor(person_id=person_id, name=name, workspace_id=ws_id, workspace=ws_name, role=role)

