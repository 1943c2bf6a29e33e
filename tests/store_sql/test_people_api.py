"""People, roles and workspaces on the SQL store, on SQLite and PostgreSQL: the role matrix over every
state-changing route (enumerated from the app), another workspace's ids 404, a wrong token 401, tokens kept
only as salted scrypt hashes (recomputed with hashlib.scrypt), who made a change taken from the signed-in
person, the sign-in cookie, and laptop mode (nobody defined) unchanged."""
from __future__ import annotations

import hashlib
import re

import pytest
import sqlalchemy as sa

from server.__main__ import main
from server.api.origins import STATE_CHANGING
from server.app import create_app
from server.auth import PUBLIC_ROUTES, RANK, ROUTE_ROLES, required_role
from server.people import add_person, list_people, remove_person
from server.settings import Settings
from server.sqlstore import SqlStore, make_engine, upgrade
from tests.api.test_snapshots import ITEMS, make_data, save
from tests.conftest import local_client

RATINGS = b"unit,r1,r2\n1,1,1\n2,2,2\n3,3,2\n4,1,1\n5,2,3\n"


def bearer(token: str) -> dict:
    return {"Authorization": f"Bearer {token}"}


def routes_of(app):
    """(methods, path, name) of every route the app serves, through included routers."""
    def walk(routes, prefix=""):
        for r in routes:
            if hasattr(r, "original_router"):
                yield from walk(r.original_router.routes, prefix + r.include_context.prefix)
            elif getattr(r, "methods", None):
                yield set(r.methods), prefix + r.path, r.name
    return list(walk(app.routes))


@pytest.fixture
def team(sql_url, tmp_path):
    """A team server: workspace 'lab' (owner, analyst, viewer) with a dataset and a snapshot; 'other' with
    its own analyst, dataset and snapshot."""
    store = SqlStore(sql_url)
    tokens = {}
    for name, ws, role in (("Olga", "lab", "owner"), ("Ana", "lab", "analyst"), ("Vic", "lab", "viewer"),
                           ("Otto", "other", "analyst")):
        tokens[name] = add_person(store, name, workspace=ws, role=role)[1]
    store.close()
    app = create_app(Settings(data_dir=tmp_path / "data", database_url=sql_url))
    _, raw, cb = make_data()
    ids = {}
    with local_client(app) as client:
        for who, ws in (("Ana", "lab"), ("Otto", "other")):
            r = client.post("/api/datasets", headers=bearer(tokens[who]), data={"id_column": "pid"},
                            files={"file": ("w.csv", raw, "text/csv"), "codebook": ("cb.csv", cb, "text/csv")})
            assert r.status_code == 201, r.text
            ids[ws] = r.json()["id"]
            client.headers.update(bearer(tokens[who]))
            s = save(client, ids[ws], author="Mallory")
            assert s.status_code == 201, s.text
            ids[ws + "_snap"] = s.json()["id"]
            client.headers.pop("Authorization")
    return app, tokens, ids, sql_url


def _fill(path: str, ids: dict) -> str:
    for param, value in (("dataset_id", ids["lab"]), ("snapshot_id", ids["lab_snap"]), ("a", ids["lab_snap"]),
                         ("b", ids["lab_snap"]), ("run_id", "r0000000000000000"), ("name", "Nobody")):
        path = path.replace("{" + param + "}", value)
    assert "{" not in path, f"no id to put in {path}: add it to _fill"
    return path


def test_every_state_changing_route_has_a_role(tmp_path):
    routes = routes_of(create_app(Settings(data_dir=tmp_path / "data")))
    changing = {name for methods, _, name in routes if methods & STATE_CHANGING}
    assert changing, "no state-changing routes found: the walk over the app's routes is broken"
    missing = changing - set(ROUTE_ROLES) - PUBLIC_ROUTES
    assert not missing, f"state-changing routes without a role in server/auth.py ROUTE_ROLES: {sorted(missing)}"
    assert {"upload_dataset", "delete_dataset", "save_snapshot", "post_event"} <= changing
    assert required_role("a_route_nobody_classified", "POST") == "owner"  # the safe default
    assert required_role("a_route_nobody_classified", "GET") == "viewer"


def test_role_matrix_over_every_state_changing_route(team):
    app, tokens, ids, _ = team
    routes = [(m, p, n) for m, p, n in routes_of(app)
              if (m & STATE_CHANGING or n in ROUTE_ROLES) and n not in PUBLIC_ROUTES]
    routes.sort(key=lambda r: r[2] == "delete_dataset")  # the deletion last: the others need the dataset
    seen = set()
    with local_client(app) as client:
        for person, role in (("Vic", "viewer"), ("Ana", "analyst"), ("Olga", "owner")):
            for methods, path, name in routes:
                method = sorted(methods - {"HEAD"})[0]
                need = required_role(name, method)
                r = client.request(method, _fill(path, ids), headers=bearer(tokens[person]), json={})
                allowed = RANK[role] >= RANK[need]
                assert r.status_code != 401, (person, name, r.text)
                if allowed:
                    assert r.status_code != 403, (person, role, name, r.text)
                else:
                    assert r.status_code == 403, (person, role, name, r.status_code, r.text)
                    assert r.json()["error"]["code"] == "forbidden"
                seen.add((role, name, allowed))
    changing = {n for m, _, n in routes if m & STATE_CHANGING}
    # a viewer may only compute answers from stored data; every other change is refused
    viewer_ok = {n for r, n, ok in seen if r == "viewer" and ok}
    assert viewer_ok & changing == {n for n in changing if ROUTE_ROLES[n] == "viewer"}
    assert {"upload_dataset", "save_snapshot", "post_event", "delete_dataset", "workspace_restore"} \
        <= {n for r, n, ok in seen if r == "viewer" and not ok}
    assert {n for r, n, ok in seen if r == "analyst" and not ok} == {
        "delete_dataset", "workspace_restore", "workspace_backup", "add_member", "remove_member"}
    # the whole store (every workspace) is backed up and restored only on the server's command line
    assert {n for r, n, ok in seen if r == "owner" and not ok} == {"workspace_restore", "workspace_backup"}
    with local_client(app) as client:  # the owner's deletion went through
        assert client.get(f"/api/datasets/{ids['lab']}", headers=bearer(tokens["Olga"])).status_code == 404


def test_another_workspaces_ids_are_404(team):
    app, tokens, ids, _ = team
    lab, snap = ids["lab"], ids["lab_snap"]
    with local_client(app) as client:
        ana, otto = bearer(tokens["Ana"]), bearer(tokens["Otto"])
        # Ana's analysis puts the lab dataset in the engine's cache; Otto must still not reach it
        assert client.post(f"/api/datasets/{lab}/analysis", headers=ana, json={"items": ITEMS}).status_code == 200
        for method, path, body in (
                ("GET", f"/api/datasets/{lab}", None), ("POST", f"/api/datasets/{lab}/analysis", {"items": ITEMS}),
                ("GET", f"/api/datasets/{lab}/snapshots", None), ("GET", f"/api/snapshots/{snap}", None),
                ("GET", f"/api/snapshots/{snap}/report", None), ("GET", f"/api/snapshots/{snap}/compare/{snap}", None),
                ("GET", f"/api/datasets/{lab}/events", None),
                ("POST", f"/api/datasets/{lab}/events", {"action": "drop"}),
                ("POST", f"/api/datasets/{lab}/snapshots", {"name": "x", "items": ITEMS}),
                ("POST", f"/api/datasets/{ids['other']}/snapshots", {"name": "x", "items": ITEMS, "parent": snap}),
                ("POST", "/api/retest", {"first": lab, "second": ids["other"]})):
            r = client.request(method, path, headers=otto, json=body)
            assert r.status_code == 404, (method, path, r.status_code, r.text)
            assert r.json()["error"]["code"] == "not_found"
        assert [d["id"] for d in client.get("/api/datasets", headers=otto).json()] == [ids["other"]]
        assert [d["id"] for d in client.get("/api/datasets", headers=ana).json()] == [lab]
        audit = client.get("/api/audit", headers=otto).json()
        assert audit and {e["dataset_id"] for e in audit} == {ids["other"]}
        assert client.get(f"/api/datasets/{lab}", headers=ana).status_code == 200


def test_a_wrong_missing_or_revoked_token_is_401(team):
    app, tokens, ids, url = team
    with local_client(app) as client:
        for headers in ({}, bearer("nonsense"), bearer("swp_0123456789abcdef_" + "x" * 43),
                        bearer(tokens["Ana"][:-1] + ("A" if tokens["Ana"][-1] != "A" else "B")),
                        {"Cookie": "scalewright_session=" + tokens["Ana"] + "x"}):
            for method, path in (("GET", "/api/datasets"), ("POST", f"/api/datasets/{ids['lab']}/analysis"),
                                 ("GET", "/api/audit")):
                r = client.request(method, path, headers=headers, json={})
                assert r.status_code == 401, (headers, path, r.text)
                assert r.json()["error"]["code"] == "unauthorized"
        assert client.get("/api/health").status_code == 200  # open: health, the page, the sign-in
        assert client.get("/").status_code == 200
        assert client.get("/api/session").json() == {"team": True, "name": None, "workspace": None, "role": None}
        assert client.get("/api/datasets", headers=bearer(tokens["Ana"])).status_code == 200
        store = SqlStore(url)
        assert remove_person(store, "Ana", workspace="lab")
        store.close()
        assert client.get("/api/datasets", headers=bearer(tokens["Ana"])).status_code == 401  # at once


def test_tokens_are_stored_only_as_salted_scrypt_hashes(sql_url):
    store = SqlStore(sql_url)
    _, t1 = add_person(store, "Ana", workspace="lab", role="analyst")
    _, t2 = add_person(store, "Ana", workspace="other", role="analyst")  # same name elsewhere: own token
    engine = make_engine(sql_url)
    with engine.connect() as con:
        rows = con.execute(sa.text("SELECT token_key, token_salt, token_hash FROM people ORDER BY created_at")).all()
        everything = []
        for table in sa.inspect(con).get_table_names():
            everything += [repr(tuple(r)) for r in con.execute(sa.text(f"SELECT * FROM {table}")).all()]
    engine.dispose()
    for token, (key, salt, digest) in zip((t1, t2), rows):
        secret = token.split("_", 2)[2]
        assert token.startswith(f"swp_{key}_")
        assert not any(secret in text or token in text for text in everything)  # never in clear, anywhere
        # hashlib.scrypt recomputed here with the stored salt (n=2**14, r=8, p=1, 32 bytes)
        assert bytes(digest) == hashlib.scrypt(secret.encode(), salt=bytes(salt), n=2 ** 14, r=8, p=1, dklen=32)
        assert len(bytes(salt)) == 16
    assert bytes(rows[0][1]) != bytes(rows[1][1])  # a salt per person
    store.close()


def test_who_made_a_change_is_the_signed_in_person(team):
    app, tokens, ids, _ = team
    lab = ids["lab"]
    with local_client(app) as client:
        ana = {**bearer(tokens["Ana"]), "X-Scalewright-Who": "Mallory"}
        assert client.get(f"/api/snapshots/{ids['lab_snap']}", headers=ana).json()["author"] == "Ana"
        r = client.post(f"/api/datasets/{lab}/events", headers=ana, json={"who": "Mallory", "action": "drop"})
        assert r.status_code == 202, r.text
        assert app.state.live.last(lab)["who"] == "Ana"
        assert client.get(f"/api/snapshots/{ids['lab_snap']}/restore", headers=ana).status_code == 200
        audit = client.get("/api/audit", headers=ana).json()
        assert [e["action"] for e in audit] == ["snapshot_restore", "snapshot", "upload"]
        assert {e["who"] for e in audit} == {"Ana"}


def test_the_page_signs_in_with_a_cookie(team):
    app, tokens, ids, _ = team
    with local_client(app) as client:
        assert client.post("/api/session", json={"token": "swp_0123456789abcdef_" + "y" * 43}).status_code == 401
        r = client.post("/api/session", json={"token": tokens["Vic"]})
        assert r.status_code == 200, r.text
        assert r.json() == {"team": True, "name": "Vic", "workspace": "lab", "role": "viewer"}
        cookie = r.headers["set-cookie"]
        assert cookie.startswith("scalewright_session=")
        assert re.search(r"(?i)\bhttponly\b", cookie) and re.search(r"(?i)samesite=strict", cookie)
        assert client.get("/api/session").json()["name"] == "Vic"  # the cookie alone
        assert [d["id"] for d in client.get("/api/datasets").json()] == [ids["lab"]]
        assert client.delete(f"/api/datasets/{ids['lab']}").status_code == 403
        assert client.delete("/api/session").status_code == 204
        assert client.get("/api/datasets").status_code == 401


def test_laptop_mode_is_unchanged_without_people(sql_url, tmp_path):
    app = create_app(Settings(data_dir=tmp_path / "data", database_url=sql_url))
    with local_client(app) as client:
        assert client.get("/api/datasets").status_code == 200
        assert client.get("/api/session").json()["team"] is False
        r = client.post("/api/session", json={"token": "anything"})
        assert r.status_code == 409 and r.json()["error"]["code"] == "no_people"
        _, raw, cb = make_data()
        r = client.post("/api/datasets", data={"id_column": "pid", "who": "Ana"},
                        files={"file": ("w.csv", raw, "text/csv")})
        assert r.status_code == 201
        assert save(client, r.json()["id"], author="Team A").json()["author"] == "Team A"  # the typed name
        assert client.get("/api/audit").json()[-1]["who"] == "Ana"
    shared = create_app(Settings(data_dir=tmp_path / "data2", database_url=sql_url, host="0.0.0.0", token="meet"))
    with local_client(shared) as client:  # on the LAN: the meeting token, as before
        assert client.get("/api/datasets").status_code == 401
        assert client.get("/api/datasets", headers={"X-Scalewright-Token": "meet"}).status_code == 200
        assert client.get("/api/datasets", headers=bearer("meet")).status_code == 200


def test_a_team_server_does_not_take_the_meeting_token(team, tmp_path):
    _, tokens, _, url = team
    app = create_app(Settings(data_dir=tmp_path / "d3", database_url=url, host="0.0.0.0", token="meet"))
    with local_client(app) as client:
        assert client.get("/api/datasets", headers={"X-Scalewright-Token": "meet"}).status_code == 401
        assert client.get("/api/datasets", headers=bearer(tokens["Vic"])).status_code == 200


def test_people_command(sql_url, capsys):
    assert main(["people", "add", "Ana Lima", "--workspace", "lab", "--role", "owner", "--database", sql_url]) == 0
    out = capsys.readouterr().out
    token = out.strip().splitlines()[-1]
    assert "Ana Lima" in out and re.fullmatch(r"swp_[0-9a-f]{16}_[A-Za-z0-9_-]{43}", token)
    assert main(["people", "add", "Ana Lima", "--workspace", "lab", "--role", "viewer", "--database", sql_url]) == 1
    assert "already a member" in capsys.readouterr().err
    assert main(["people", "add", "Bo", "--workspace", "lab", "--role", "viewer", "--database", sql_url]) == 0
    capsys.readouterr()
    assert main(["people", "list", "--database", sql_url]) == 0
    listed = capsys.readouterr().out
    assert "lab\tAna Lima\towner" in listed and "lab\tBo\tviewer" in listed and token not in listed
    assert main(["people", "remove", "Ana Lima", "--workspace", "lab", "--database", sql_url]) == 1
    assert "last owner" in capsys.readouterr().err  # Bo is still a member
    assert main(["people", "remove", "Bo", "--workspace", "lab", "--database", sql_url]) == 0
    assert main(["people", "remove", "Bo", "--workspace", "lab", "--database", sql_url]) == 1
    store = SqlStore(sql_url)
    assert [p["name"] for p in list_people(store)] == ["Ana Lima"]
    store.close()


def test_rows_of_the_previous_schema_go_to_the_default_workspace(sql_url, tmp_path):
    engine = make_engine(sql_url)
    upgrade(engine, "0002")
    engine.dispose()
    engine = make_engine(sql_url)  # rows as revision 0002's code wrote them, in plain SQL
    _, raw, _ = make_data()
    with engine.begin() as con:
        con.execute(sa.text("INSERT INTO datasets (id, name, filename, codebook_filename, sha256, codebook_sha256, "
                            "size_bytes, options, meta, created_at) VALUES ('d00000000000old1', 'wave 1', 'w.csv', "
                            "NULL, :sha, NULL, :n, '{\"id_column\":\"pid\"}', '{}', '2026-01-02T03:04:05.000000Z')"),
                    {"sha": hashlib.sha256(raw).hexdigest(), "n": len(raw)})
        con.execute(sa.text("INSERT INTO dataset_files (dataset_id, kind, part, data) "
                            "VALUES ('d00000000000old1', 'raw', 0, :b)"), {"b": raw})
        con.execute(sa.text("INSERT INTO snapshots (id, dataset_id, created_at, record) VALUES ('s00000000000old2', "
                            "'d00000000000old1', '2026-01-02T03:05:00.000000Z', :r)"),
                    {"r": '{"id": "s00000000000old2", "dataset_id": "d00000000000old1", "name": "first cut", '
                          '"author": "Team A", "items": ["Q1"]}'})
        con.execute(sa.text("INSERT INTO audit (at, who, action, dataset_id, details) VALUES "
                            "('2026-01-02T03:04:06.000000Z', 'Ana', 'upload', 'd00000000000old1', '{}')"))
    engine.dispose()
    store = SqlStore(sql_url)  # upgraded at start
    assert store.revision == "0004"
    assert store.get_dataset("d00000000000old1")["name"] == "wave 1"  # laptop mode: everything, as before
    _, olga = add_person(store, "Olga", workspace="default", role="owner")
    _, lea = add_person(store, "Lea", workspace="lab", role="owner")
    store.close()
    app = create_app(Settings(data_dir=tmp_path / "data", database_url=sql_url))
    with local_client(app) as client:
        assert [d["id"] for d in client.get("/api/datasets", headers=bearer(olga)).json()] == ["d00000000000old1"]
        snaps = client.get("/api/datasets/d00000000000old1/snapshots", headers=bearer(olga)).json()
        assert [s["id"] for s in snaps] == ["s00000000000old2"] and snaps[0]["author"] == "Team A"
        assert client.post("/api/datasets/d00000000000old1/analysis", headers=bearer(olga),
                           json={"items": ITEMS}).status_code == 200
        actions = [(e["action"], e["who"]) for e in client.get("/api/audit", headers=bearer(olga)).json()]
        assert ("upload", "Ana") in actions and ("schema_upgrade", None) in actions
        assert client.get("/api/datasets", headers=bearer(lea)).json() == []
        assert client.get("/api/datasets/d00000000000old1", headers=bearer(lea)).status_code == 404
        assert client.get("/api/snapshots/s00000000000old2", headers=bearer(lea)).status_code == 404


def test_owners_manage_the_members_of_their_workspace(team):
    app, tokens, _, _ = team
    with local_client(app) as client:
        olga, otto = bearer(tokens["Olga"]), bearer(tokens["Otto"])
        r = client.post("/api/members", headers=olga, json={"name": "Rui", "role": "viewer"})
        assert r.status_code == 201, r.text
        rui = r.json()["token"]
        assert client.get("/api/session", headers=bearer(rui)).json() == {
            "team": True, "name": "Rui", "workspace": "lab", "role": "viewer"}
        assert client.post("/api/members", headers=olga, json={"name": "Rui", "role": "owner"}).status_code == 409
        listed = client.get("/api/members", headers=bearer(rui)).json()
        assert [(m["name"], m["role"], m["token"]) for m in listed] == [
            ("Ana", "analyst", None), ("Olga", "owner", None), ("Rui", "viewer", None), ("Vic", "viewer", None)]
        assert [m["name"] for m in client.get("/api/members", headers=otto).json()] == ["Otto"]
        assert client.delete("/api/members/Otto", headers=olga).status_code == 404  # another workspace's
        assert client.delete("/api/members/Rui", headers=olga).status_code == 204
        assert client.get("/api/datasets", headers=bearer(rui)).status_code == 401
        actions = [(e["action"], e["who"]) for e in client.get("/api/audit", headers=olga).json()][:2]
        assert actions == [("member_remove", "Olga"), ("member_add", "Olga")]
