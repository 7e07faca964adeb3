"""The OpenAPI description is complete: every operation documents its success body and its errors.

Walks the app's own OpenAPI document: each operation has a 2xx answer with a body schema (a
named model, or a CSV text), or a 204 declared without a body; every 4xx answer it declares
points to the one error model; operations that need a login declare 401, those with
parameters or a body declare 422 (and 400 for a body that is not JSON, 413 for one over the size
limit), those with an id in the path declare 404, and those that change state declare 403 (a
cookie-authenticated change without its CSRF token is refused).
"""

from __future__ import annotations

import pytest

from tests.conftest import make_settings

ERROR_REF = "#/components/schemas/ErrorResponse"
METHODS = {"get", "post", "put", "patch", "delete"}


@pytest.fixture(scope="module")
def openapi(tmp_path_factory) -> dict:
    from server.app import create_app

    app = create_app(make_settings(f"sqlite:///{tmp_path_factory.mktemp('openapi') / 'railsign.db'}"))
    try:
        return app.openapi()
    finally:
        app.state.engine.dispose()


def operations(openapi: dict) -> list[tuple[str, str, dict]]:
    return [(method.upper(), path, op) for path, item in openapi["paths"].items()
            for method, op in item.items() if method in METHODS]


def _success_schema(op: dict) -> list[str]:
    """Problems with the success answers of one operation (empty: fine)."""
    problems = []
    successes = {code: answer for code, answer in op["responses"].items() if code.startswith("2")}
    if not successes:
        return ["no 2xx answer"]
    for code, answer in successes.items():
        content = answer.get("content") or {}
        if code == "204":
            if content:
                problems.append("204 with a body")
            continue
        if not content:
            problems.append(f"{code} without a body schema")
        for media, body in content.items():
            schema = body.get("schema") or {}
            if media == "application/json" and not schema.get("$ref"):
                problems.append(f"{code} {media}: no named model ({schema})")
            if media.startswith("text/") and schema.get("type") != "string":
                problems.append(f"{code} {media}: no string schema")
    return problems


def test_the_api_has_every_operation(openapi):
    ops = operations(openapi)
    assert len(ops) == 81
    names = {(m, p) for m, p, _ in ops}
    assert {("GET", "/api/v1/reviews/queue"), ("PUT", "/api/v1/teams/{team_id}/signoff-rules"),
            ("POST", "/api/v1/rails/{rail_id}/retire"), ("POST", "/api/v1/rails/{rail_id}/restore"),
            ("GET", "/api/v1/boards/{board_id}/sequence/waivers"),
            ("POST", "/api/v1/boards/{board_id}/sequence/waivers"),
            ("POST", "/api/v1/boards/{board_id}/sequence/transitions"),
            ("GET", "/api/v1/boards/{board_id}/sequence/revisions"),
            ("GET", "/api/v1/boards/{board_id}/sequence/revisions/{n}"),
            ("GET", "/api/v1/boards/{board_id}/sequence/diff")} <= names
    assert all(path.startswith("/api/v1/") or path == "/healthz" for _, path, _ in ops)


def test_every_operation_documents_its_success_body(openapi):
    problems = {f"{method} {path}": p for method, path, op in operations(openapi) if (p := _success_schema(op))}
    assert problems == {}


def test_every_error_answer_points_to_the_one_error_model(openapi):
    problems = []
    for method, path, op in operations(openapi):
        for code, answer in op["responses"].items():
            if not code.startswith("4"):
                continue
            schema = answer.get("content", {}).get("application/json", {}).get("schema", {})
            if schema.get("$ref") != ERROR_REF:
                problems.append(f"{method} {path} {code}: {schema}")
            if not answer.get("description"):
                problems.append(f"{method} {path} {code}: no description")
    assert problems == []
    assert "HTTPValidationError" not in openapi["components"]["schemas"]


def test_the_error_model_is_the_documented_shape(openapi):
    schemas = openapi["components"]["schemas"]
    assert schemas["ErrorResponse"]["required"] == ["error"]
    info = schemas["ErrorInfo"]
    assert set(info["required"]) == {"status", "code", "message", "details"}
    assert info["additionalProperties"] is False
    assert set(schemas["ErrorDetail"]["required"]) == {"field", "message"}


def test_each_operation_declares_the_errors_it_can_answer(openapi):
    problems = []
    for method, path, op in operations(openapi):
        codes = set(op["responses"])
        if path == "/healthz":
            assert codes == {"200", "503"}
            continue
        wanted = {"401"}
        if op.get("parameters") or op.get("requestBody"):
            wanted.add("422")
        if op.get("requestBody"):
            wanted |= {"400", "413"}
        if "{" in path:
            wanted.add("404")
        if method != "GET":
            wanted.add("403")
        if wanted - codes:
            problems.append(f"{method} {path}: missing {sorted(wanted - codes)}")
    assert problems == []


def test_the_answer_models_forbid_unknown_keys(openapi):
    """So a client generated from the description learns of a new key from the description, not by surprise."""
    schemas = openapi["components"]["schemas"]
    referenced = set()
    for _, _, op in operations(openapi):
        for answer in op["responses"].values():
            ref = answer.get("content", {}).get("application/json", {}).get("schema", {}).get("$ref")
            if ref:
                referenced.add(ref.rsplit("/", 1)[1])
    open_models = [name for name in referenced if schemas[name].get("additionalProperties") is not False]
    assert open_models == []
