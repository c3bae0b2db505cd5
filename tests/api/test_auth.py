"""API keys: every route of the OpenAPI schema but /healthz needs a key of the right scope.

The walker reads the routes from ``app.openapi()``, so a route added later without the
key dependency (or missing from the scope table below) fails these tests by itself.
"""

from __future__ import annotations

import re
from typing import Any

import pytest
from fastapi import FastAPI
from sqlalchemy import Engine

from service.pipeline.keys import create_key, revoke_key
from service.storage.session import make_session_factory
from tests.factories import SCOPES, TestClient, assert_error, auth, document, put_document

# The scope each route needs. A new route must be added here with the scope it should
# need, or test_every_route_is_in_the_scope_table fails.
EXPECTED_SCOPE: dict[tuple[str, str], str] = {
    ("GET", "/readyz"): "read",
    ("GET", "/v1/collections"): "read",
    ("POST", "/v1/collections"): "admin",
    ("GET", "/v1/collections/{collection}"): "read",
    ("PATCH", "/v1/collections/{collection}"): "admin",
    ("DELETE", "/v1/collections/{collection}"): "admin",
    ("GET", "/v1/collections/{collection}/documents"): "read",
    ("POST", "/v1/collections/{collection}/documents"): "write",
    ("GET", "/v1/collections/{collection}/documents/{document_id}"): "read",
    ("PUT", "/v1/collections/{collection}/documents/{document_id}"): "write",
    ("DELETE", "/v1/collections/{collection}/documents/{document_id}"): "write",
    ("POST", "/v1/collections/{collection}/builds"): "write",
    ("GET", "/v1/collections/{collection}/builds"): "read",
    ("GET", "/v1/collections/{collection}/builds/{build_id}"): "read",
    ("DELETE", "/v1/collections/{collection}/builds/{build_id}"): "write",
    ("GET", "/v1/collections/{collection}/index"): "read",
    ("GET", "/v1/collections/{collection}/documents/{document_id}/neighbors"): "read",
    ("POST", "/v1/collections/{collection}/similar"): "read",
    ("GET", "/v1/collections/{collection}/distance"): "read",
    ("GET", "/v1/collections/{collection}/path"): "read",
    ("GET", "/v1/collections/{collection}/clusters"): "read",
    ("GET", "/v1/collections/{collection}/clusters/{group_id}"): "read",
    ("PATCH", "/v1/collections/{collection}/clusters/{group_id}"): "write",
    ("GET", "/v1/collections/{collection}/map"): "read",
}
PUBLIC = {("GET", "/healthz")}

# Values for path parameters: the walker creates the collection and the document first,
# so every request names things that exist.
PATH_VALUES = {"collection": "walk", "document_id": "doc-1", "build_id": "1", "group_id": "0"}
BODIES: dict[str, dict[str, Any]] = {
    "PUT": {"json": {"title": "Walk", "text": "Harbour walk along the tide line."}},
    "POST": {"json": [document(2)]},
    "PATCH": {"json": {"settings": {"neighbors": 20}}},
}


def routes(app: FastAPI) -> list[tuple[str, str]]:
    """Every (method, path template) of the app's OpenAPI schema."""
    found = []
    for path, operations in app.openapi()["paths"].items():
        for method in operations:
            if method.upper() in {"GET", "POST", "PUT", "PATCH", "DELETE"}:
                found.append((method.upper(), path))
    return sorted(found)


def fill(path: str) -> str:
    def value(match: re.Match[str]) -> str:
        name = match.group(1)
        assert name in PATH_VALUES, f"give the auth walker a value for {{{name}}} ({path})"
        return PATH_VALUES[name]

    return re.sub(r"\{(\w+)\}", value, path)


def ensure_walk_state(client: TestClient, keys: dict[str, str]) -> None:
    """(Re-)create the collection and document the path values name."""
    response = client.post("/v1/collections", json={"name": "walk"}, headers=auth(keys["admin"]))
    assert response.status_code in (201, 409), response.text
    response = put_document(client, keys, "walk", document(1))
    assert response.status_code in (200, 201), response.text


def walk(client: TestClient, keys: dict[str, str], revoked: str) -> list[str]:
    """Probe every route without a key, with bad, revoked and too-small keys and with the
    right key; return what went wrong (empty when every route is guarded)."""
    failures: list[str] = []
    ensure_walk_state(client, keys)
    # Mutating probes last, so a DELETE cannot hide the routes after it.
    order = {"GET": 0, "PUT": 1, "POST": 1, "PATCH": 1, "DELETE": 2}
    for method, path in sorted(routes(client.app), key=lambda r: (order[r[0]], r)):  # type: ignore[arg-type]
        url = fill(path)
        body = BODIES.get(method, {})

        def call(
            headers: dict[str, str], url: str = url, method: str = method, body: Any = body
        ) -> Any:
            return client.request(method, url, headers=headers, **body)

        if (method, path) in PUBLIC:
            if call({}).status_code != 200:
                failures.append(f"{method} {path}: public route does not answer without a key")
            continue
        for label, headers in [
            ("no key", {}),
            ("empty bearer", {"Authorization": "Bearer "}),
            ("wrong scheme", {"Authorization": f"Basic {keys['admin']}"}),
            ("unknown key", auth("tdm_not-a-key-anyone-was-given")),
            ("revoked key", auth(revoked)),
        ]:
            response = call(headers)
            if response.status_code != 401:
                failures.append(f"{method} {path} with {label}: {response.status_code}")
                continue
            try:
                assert_error(response, 401, "unauthenticated")
            except AssertionError as exc:
                failures.append(f"{method} {path} with {label}: bad error shape {exc}")
            if response.headers.get("www-authenticate", "").lower() != "bearer":
                failures.append(f"{method} {path} with {label}: no WWW-Authenticate: Bearer")
        needed = EXPECTED_SCOPE.get((method, path))
        if needed is None:
            failures.append(f"{method} {path}: not in EXPECTED_SCOPE")
            continue
        for scope in SCOPES[: SCOPES.index(needed)]:
            response = call(auth(keys[scope]))
            if response.status_code != 403:
                failures.append(f"{method} {path} with a {scope} key: {response.status_code}")
                continue
            try:
                assert_error(response, 403, "forbidden")
            except AssertionError as exc:
                failures.append(f"{method} {path} with a {scope} key: bad error shape {exc}")
        for scope in SCOPES[SCOPES.index(needed) :]:
            ensure_walk_state(client, keys)
            response = call(auth(keys[scope]))
            if response.status_code in (401, 403) or response.status_code >= 500:
                failures.append(
                    f"{method} {path} with a {scope} key: {response.status_code} "
                    f"{response.text[:200]}"
                )
    return failures


def _revoked_key(engine: Engine) -> str:
    with make_session_factory(engine)() as session:
        raw, info = create_key(session, "to-revoke", "admin")
        revoke_key(session, info.id)
    return raw


def test_every_route_needs_a_key_of_its_scope(
    client: TestClient, keys: dict[str, str], engine: Engine
) -> None:
    failures = walk(client, keys, _revoked_key(engine))
    assert not failures, "\n".join(failures)


def test_every_route_is_in_the_scope_table(client: TestClient) -> None:
    listed = set(EXPECTED_SCOPE) | PUBLIC
    present = set(routes(client.app))  # type: ignore[arg-type]
    assert present - listed == set(), "routes without an expected scope"
    assert listed - present == set(), "scope table names routes that are gone"


def test_walker_catches_a_route_without_a_key(
    client: TestClient, keys: dict[str, str], engine: Engine
) -> None:
    """The guard itself: an unguarded route is reported, and so is a wrongly scoped one."""
    app: FastAPI = client.app  # type: ignore[assignment]

    @app.get("/v1/collections/{collection}/leak")
    def leak(collection: str) -> dict[str, str]:
        return {"collection": collection}

    app.openapi_schema = None  # rebuild the cached schema with the new route
    EXPECTED_SCOPE[("GET", "/v1/collections/{collection}/leak")] = "read"
    try:
        failures = walk(client, keys, _revoked_key(engine))
    finally:
        del EXPECTED_SCOPE[("GET", "/v1/collections/{collection}/leak")]
    assert any("/leak with no key: 200" in f for f in failures), failures
    assert all("/leak" in f for f in failures), failures


def test_healthz_needs_no_key(client: TestClient) -> None:
    response = client.get("/healthz")
    assert response.status_code == 200
    assert response.json() == {"status": "ok"}


def test_revoked_key_stops_working(client: TestClient, engine: Engine) -> None:
    with make_session_factory(engine)() as session:
        raw, info = create_key(session, "short-lived", "read")
        assert client.get("/v1/collections", headers=auth(raw)).status_code == 200
        revoke_key(session, info.id)
    assert_error(client.get("/v1/collections", headers=auth(raw)), 401, "unauthenticated")


@pytest.mark.parametrize("header", ["bearer {key}", "Bearer   {key}  ", "BEARER {key}"])
def test_bearer_scheme_is_case_insensitive(
    client: TestClient, keys: dict[str, str], header: str
) -> None:
    response = client.get(
        "/v1/collections", headers={"Authorization": header.format(key=keys["read"])}
    )
    assert response.status_code == 200, response.text


def test_forbidden_names_the_scopes(client: TestClient, keys: dict[str, str]) -> None:
    error = assert_error(
        client.post("/v1/collections", json={"name": "x"}, headers=auth(keys["write"])),
        403,
        "forbidden",
    )
    assert error["details"] == {"granted": "write", "needed": "admin"}
