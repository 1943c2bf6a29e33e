"""/api/openapi.json describes the API as it is: the upload's multipart body, the error codes and shape."""
from __future__ import annotations

import pytest

from server.api.schemas import ErrorBody

METHODS = ("get", "post", "put", "patch", "delete")


@pytest.fixture
def spec(client):
    r = client.get("/api/openapi.json")
    assert r.status_code == 200
    return r.json()


def _operations(spec):
    return [(m, p, op) for p, item in spec["paths"].items() for m, op in item.items() if m in METHODS]


def test_the_upload_documents_its_multipart_fields(spec):
    body = spec["paths"]["/api/datasets"]["post"]["requestBody"]
    assert body["required"] is True
    schema = body["content"]["multipart/form-data"]["schema"]
    assert schema["required"] == ["file"]
    props = schema["properties"]
    for name in ("file", "codebook"):
        assert props[name]["format"] == "binary"
        assert props[name]["contentMediaType"] == "application/octet-stream"
    assert {"missing_codes", "id_column", "scale_min", "scale_max", "name"} <= set(props)
    answers = spec["paths"]["/api/datasets"]["post"]["responses"]
    assert {"201", "400", "403", "413", "415", "421", "422", "507"} <= set(answers)
    assert answers["201"]["content"]["application/json"]["schema"] == {"$ref": "#/components/schemas/DatasetOut"}


def test_every_error_answer_uses_the_real_error_schema(spec):
    assert "HTTPValidationError" not in spec["components"]["schemas"]
    for method, path, op in _operations(spec):
        codes = {int(c) for c in op["responses"] if c.isdigit()}
        assert {401, 421, 500, 503} <= codes, (method, path)
        if method != "get":
            assert {403, 507} <= codes, (method, path)
        if "{" in path:
            assert 404 in codes, (method, path)
        if op.get("parameters") or op.get("requestBody"):
            assert 422 in codes, (method, path)
        for code in codes:
            if code >= 400:
                content = op["responses"][str(code)]["content"]
                assert content == {"application/json": {"schema": {"$ref": "#/components/schemas/ErrorBody"}}}, (
                    method, path, code)
                assert op["responses"][str(code)]["description"], (method, path, code)


def test_the_documented_error_schema_is_the_one_the_server_sends(client, spec):
    error = spec["components"]["schemas"]["ErrorBody"]
    assert error["required"] == ["error"]
    detail = spec["components"]["schemas"]["ErrorDetail"]
    assert set(detail["properties"]) == {"code", "message", "details"}
    answers = [client.get("/api/datasets/nope"), client.post("/api/datasets", content=b"x"),
               client.post("/api/datasets/nope/analysis", json={"missing": "sometimes"}),
               client.get("/api/health", headers={"Host": "attacker.example"})]
    assert [a.status_code for a in answers] == [404, 415, 422, 421]
    for answer in answers:
        ErrorBody.model_validate(answer.json())


def test_route_specific_codes_are_listed(spec):
    paths = spec["paths"]
    assert "409" in paths["/api/snapshots/{snapshot_id}/responses"]["get"]["responses"]
    assert "404" in paths["/api/retest"]["post"]["responses"]
    assert "413" in paths["/api/agreement/upload"]["post"]["responses"]
    form = paths["/api/agreement/upload"]["post"]["requestBody"]["content"]["multipart/form-data"]["schema"]
    form = spec["components"]["schemas"][form["$ref"].rsplit("/", 1)[-1]]
    assert form["properties"]["file"]["contentMediaType"] == "application/octet-stream"
    assert "file" in form["required"]
    health = paths["/api/health"]["get"]["responses"]["200"]["content"]["application/json"]["schema"]
    assert health == {"$ref": "#/components/schemas/HealthOut"}
