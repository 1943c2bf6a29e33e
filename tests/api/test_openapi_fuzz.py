"""Property-based fuzzing from /api/openapi.json: no 5xx, only documented codes, always the error shape.

Hypothesis draws an operation of the served OpenAPI document, then its path and query parameters and
body from the operation's own schemas (mixed with known ids and item names so that some requests reach
the engine, and with junk so that others must be refused). The requests go to the app in-process
(Host 127.0.0.1), on a temporary data folder holding the demo datasets and one snapshot.
"""
from __future__ import annotations

import json
from urllib.parse import quote

import pytest
from hypothesis import HealthCheck, given, note, settings
from hypothesis import strategies as st

from server.app import create_app
from tests.conftest import local_client

MAX_EXAMPLES = 300
METHODS = ("get", "post", "put", "patch", "delete")


@pytest.fixture
def fuzz_client(make_settings):
    with local_client(create_app(make_settings(demo=True)),
                      raise_server_exceptions=False) as client:
        yield client


def _resolve(spec: dict, schema: dict) -> dict:
    while "$ref" in schema:
        name = schema["$ref"].rsplit("/", 1)[-1]
        schema = spec["components"]["schemas"][name]
    return schema


JSON_LEAVES = st.one_of(st.none(), st.booleans(), st.integers(-10**6, 10**6),
                        st.floats(allow_nan=False, allow_infinity=False), st.text(max_size=12))
ANY_JSON = st.recursive(JSON_LEAVES, lambda inner: st.one_of(st.lists(inner, max_size=4),
                                                             st.dictionaries(st.text(max_size=8), inner,
                                                                             max_size=4)),
                        max_leaves=8)


def from_schema(spec: dict, schema: dict, words: list[str], depth: int = 0) -> st.SearchStrategy:
    """Values that mostly fit ``schema`` (the subset of JSON Schema pydantic writes)."""
    schema = _resolve(spec, schema)
    if depth > 4:
        return JSON_LEAVES
    if "enum" in schema:
        return st.sampled_from(schema["enum"])
    if "const" in schema:
        return st.just(schema["const"])
    for key in ("anyOf", "oneOf", "allOf"):
        if key in schema:
            return st.one_of([from_schema(spec, s, words, depth + 1) for s in schema[key]])
    kind = schema.get("type")
    if isinstance(kind, list):
        return st.one_of([from_schema(spec, {**schema, "type": k}, words, depth + 1) for k in kind])
    if kind == "null":
        return st.none()
    if kind == "boolean":
        return st.booleans()
    if kind == "integer":
        lo, hi = schema.get("minimum"), schema.get("maximum")
        near = st.integers(min_value=lo if lo is not None else -5, max_value=hi if hi is not None else 60)
        return st.one_of(near, st.integers(-10**9, 10**9))
    if kind == "number":
        lo, hi = schema.get("minimum"), schema.get("maximum")
        return st.one_of(st.floats(min_value=lo, max_value=hi, allow_nan=False, allow_infinity=False),
                         st.floats(allow_nan=False, allow_infinity=False))
    if kind == "string":
        return st.one_of(st.sampled_from(words), st.text(max_size=schema.get("maxLength", 30) + 5))
    if kind == "array":
        items = from_schema(spec, schema.get("items", {}), words, depth + 1)
        return st.lists(items, max_size=6)
    if kind == "object" or "properties" in schema:
        props = schema.get("properties", {})
        required = [k for k in schema.get("required", []) if k in props]
        optional = [k for k in props if k not in required]
        base = st.fixed_dictionaries({k: from_schema(spec, props[k], words, depth + 1) for k in required},
                                     optional={k: from_schema(spec, props[k], words, depth + 1) for k in optional})
        extra = schema.get("additionalProperties")
        if isinstance(extra, dict) and not props:
            return st.dictionaries(st.sampled_from(words) | st.text(max_size=8),
                                   from_schema(spec, extra, words, depth + 1), max_size=4)
        # only the required fields (with values more likely to pass), or a draw over all of them
        minimal = st.fixed_dictionaries({k: from_schema(spec, props[k], words, depth + 1) for k in required})
        return st.one_of(minimal, base)
    return ANY_JSON


def _operations(spec: dict) -> list[tuple[str, str, dict]]:
    return [(method, path, op) for path, item in sorted(spec["paths"].items())
            for method, op in item.items() if method in METHODS]


def _known(client) -> tuple[list[str], list[str], list[str]]:
    datasets = client.get("/api/datasets").json()
    ids = [d["id"] for d in datasets]
    items = sorted({i["name"] for d in datasets for i in d["items"]})
    snaps = [s["id"] for d in ids for s in client.get(f"/api/datasets/{d}/snapshots").json()]
    return ids, snaps, items


def _path_value(draw, known: list[str], *, known_allowed: bool = True) -> str:
    # An encoded '/' is decoded before routing (ASGI paths are decoded), so it would name another route;
    # '.' and '..' are dot segments the client resolves away.
    junk = st.text(st.characters(exclude_characters="/", exclude_categories=("Cs",)), min_size=1, max_size=20)
    junk = junk.filter(lambda s: s not in (".", ".."))
    if known and known_allowed:
        return draw(st.one_of(st.sampled_from(known), junk))
    return draw(junk)


def _multipart(draw, spec: dict, schema: dict, words: list[str], demo_csv: bytes):
    schema = _resolve(spec, schema)
    files, data = {}, {}
    required = set(schema.get("required", []))
    minimal = draw(st.booleans())  # only the required fields, or some of the others too
    for name, prop in schema.get("properties", {}).items():
        prop = _resolve(spec, prop)
        if name not in required and (minimal or draw(st.booleans())):
            continue
        if prop.get("format") == "binary" or "contentMediaType" in prop:
            content = draw(st.one_of(st.just(demo_csv), st.binary(max_size=200),
                                     st.text(max_size=200).map(str.encode),
                                     st.just(b"a,b,c\n1,2,3\n2,3,1\n3,1,2\n")))
            files[name] = (draw(st.sampled_from(["r.csv", "r.tsv", "r.xlsx", "r.txt", ""])), content, "text/csv")
            if minimal and draw(st.booleans()):
                files[name] = ("r.csv", demo_csv, "text/csv")
        else:
            data[name] = str(draw(from_schema(spec, prop, words)))
    return files, data


def _assert_error_shape(response, where: str) -> None:
    body = response.json()
    assert set(body) == {"error"}, where
    error = body["error"]
    assert set(error) == {"code", "message", "details"}, where
    assert isinstance(error["code"], str) and error["code"], where
    assert isinstance(error["message"], str) and error["message"], where
    assert isinstance(error["details"], dict), where


def test_requests_drawn_from_the_openapi_get_documented_answers(fuzz_client):
    client = fuzz_client
    spec = client.get("/api/openapi.json").json()
    operations = _operations(spec)
    demo_csv = ("respondent,Q1,Q2,Q3\n" + "".join(f"r{i},{i % 5 + 1},{(i * 3) % 5 + 1},{(i * 7) % 5 + 1}\n"
                                                   for i in range(30))).encode()
    ids, _, items = _known(client)
    first = client.get(f"/api/datasets/{ids[0]}").json()
    kept = [i["name"] for i in first["items"]][:6]
    snap = client.post(f"/api/datasets/{ids[0]}/snapshots",
                       json={"name": "fuzz", "items": kept, "settings": {"pa_iterations": 20, "seed": 1}})
    assert snap.status_code == 201, snap.text
    spare = client.post("/api/datasets", files={"file": ("spare.csv", demo_csv, "text/csv")})
    assert spare.status_code == 201, spare.text
    spare = [spare.json()["id"]]
    # a fixed vocabulary, so that every example draws the same way whatever the earlier ones changed
    datasets, snapshots, _ = _known(client)
    words = [*datasets, *snapshots, *items, "", "pearson", "oblimin", "-9", "respondent"]
    seen: dict[str, set[int]] = {}

    @settings(max_examples=MAX_EXAMPLES, deadline=None, derandomize=True, database=None,
              suppress_health_check=list(HealthCheck))
    @given(data=st.data())
    def one_request(data):
        index = data.draw(st.sampled_from(range(len(operations))), label="operation")
        method, template, op = operations[index]
        note(f"{method.upper()} {template}")
        path = template
        for param in op.get("parameters", []):
            if param["in"] != "path":
                continue
            known = snapshots if "snapshot" in param["name"] or param["name"] in ("a", "b") else datasets
            if method == "delete":  # deleting the demo would leave the other operations nothing to find
                known = spare
            # The events stream of an existing dataset stays open by design; only its refusals are drawn.
            stream = method == "get" and template.endswith("/events")
            value = _path_value(data.draw, known, known_allowed=not stream)
            path = path.replace("{" + param["name"] + "}", quote(value, safe=""))
        query = {}
        for param in op.get("parameters", []):
            if param["in"] == "query" and data.draw(st.booleans()):
                value = data.draw(from_schema(spec, param.get("schema", {}), words) | st.text(max_size=8))
                query[param["name"]] = json.dumps(value) if isinstance(value, bool) else str(value)
        kwargs: dict = {"params": query}
        content = (op.get("requestBody") or {}).get("content", {})
        if "application/json" in content:
            body_schema = content["application/json"]["schema"]
            if data.draw(st.integers(0, 9)) == 0:  # sometimes not JSON at all
                kwargs["content"] = data.draw(st.binary(max_size=50))
                kwargs["headers"] = {"content-type": "application/json"}
            else:
                kwargs["json"] = data.draw(from_schema(spec, body_schema, words) | ANY_JSON)
        elif "multipart/form-data" in content:
            if data.draw(st.integers(0, 9)) == 0:
                kwargs["content"] = data.draw(st.binary(max_size=50))
                kwargs["headers"] = {"content-type": data.draw(st.sampled_from(
                    ["multipart/form-data; boundary=x", "text/plain", "application/json"]))}
            else:
                files, form = _multipart(data.draw, spec, content["multipart/form-data"]["schema"], words,
                                         demo_csv)
                kwargs["files"], kwargs["data"] = files or None, form or None
                if not files:  # httpx sends url-encoded without files; force multipart with an empty part
                    kwargs["files"] = {"_": ("", b"", "text/plain")}
        response = client.request(method.upper(), path, **kwargs)
        where = f"{method.upper()} {path} {kwargs!r:.300} -> {response.status_code} {response.text[:300]}"
        assert response.status_code < 500, where
        assert str(response.status_code) in op["responses"], where
        if response.status_code >= 400:
            _assert_error_shape(response, where)
        seen.setdefault(f"{method.upper()} {template}", set()).add(response.status_code)

    one_request()
    # the fuzzing reached every operation, and some of them got past validation
    assert len(seen) == len(operations), sorted({f"{m.upper()} {p}" for m, p, _ in operations} - set(seen))
    assert sum(1 for codes in seen.values() if any(c < 300 for c in codes)) >= len(operations) // 2, seen
