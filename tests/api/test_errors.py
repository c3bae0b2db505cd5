"""Bad input gets one JSON error shape with the right status, and changes nothing.

Each group of cases runs against one database holding a collection with documents; after
every case the collections (settings, change counter, time of last change), documents and
term table must be exactly as before.
"""

from __future__ import annotations

import base64
import json
from typing import Any

import pytest
from sqlalchemy import Engine
from sqlalchemy.exc import (
    DataError,
    IntegrityError,
    InterfaceError,
    OperationalError,
    ProgrammingError,
)
from sqlalchemy.exc import TimeoutError as PoolTimeoutError

from tests.factories import (
    TestClient,
    assert_error,
    auth,
    db_snapshot,
    document,
    new_collection,
    put_document,
)

DOC = "/v1/collections/news/documents/doc-9"
DOCS = "/v1/collections/news/documents"
COLLS = "/v1/collections"
NEWS = "/v1/collections/news"


def _cursor(value: Any) -> str:
    return base64.urlsafe_b64encode(json.dumps(value).encode()).decode().rstrip("=")


# (label, method, url, request keyword arguments, status, error code or None)
Case = tuple[str, str, str, dict[str, Any], int, str | None]

DOCUMENT_CASES: list[Case] = [
    ("malformed json", "PUT", DOC, {"content": b'{"text": "abc"'}, 400, "malformed_json"),
    ("empty body", "PUT", DOC, {"content": b""}, 400, "empty_body"),
    ("not utf-8", "PUT", DOC, {"content": b'{"text": "caf\xe9 au lait"}'}, 400, "bad_encoding"),
    ("utf-16", "PUT", DOC, {"content": '{"text": "tide"}'.encode("utf-16")}, 400, None),
    ("text a number", "PUT", DOC, {"json": {"text": 5}}, 422, "invalid_input"),
    ("title a list", "PUT", DOC, {"json": {"text": "tide", "title": ["x"]}}, 422, None),
    ("metadata a string", "PUT", DOC, {"json": {"text": "tide", "metadata": "x"}}, 422, None),
    ("metadata a list", "PUT", DOC, {"json": {"text": "tide", "metadata": [1]}}, 422, None),
    ("date a number", "PUT", DOC, {"json": {"text": "tide", "published_at": 2021}}, 422, None),
    ("date prose", "PUT", DOC, {"json": {"text": "tide", "published_at": "yesterday"}}, 422, None),
    ("text missing", "PUT", DOC, {"json": {"title": "Only a title"}}, 422, "invalid_input"),
    ("text empty", "PUT", DOC, {"json": {"text": ""}}, 422, "invalid_input"),
    ("text blank", "PUT", DOC, {"json": {"text": " \n\t "}}, 422, "invalid_input"),
    ("text null", "PUT", DOC, {"json": {"text": None}}, 422, "invalid_input"),
    ("unknown field", "PUT", DOC, {"json": {"text": "tide", "colour": "red"}}, 422, None),
    ("body a list", "PUT", DOC, {"json": [{"text": "tide"}]}, 422, "invalid_input"),
    ("body null", "PUT", DOC, {"content": b"null"}, 422, "invalid_input"),
    ("id differs", "PUT", DOC, {"json": {"id": "doc-10", "text": "tide"}}, 422, None),
    ("text too large", "PUT", DOC, {"json": {"text": "tide " * 500}}, 413, "payload_too_large"),
    # 1,000 three-byte characters: under the limit in characters, over it in bytes.
    ("text too large in utf-8", "PUT", DOC, {"json": {"text": "€" * 1000}}, 413, None),
    (
        "title + text too large",
        "PUT",
        DOC,
        {"json": {"title": "t" * 1500, "text": "x" * 600}},
        413,
        "payload_too_large",
    ),
    ("id too long", "PUT", f"{DOCS}/{'a' * 257}", {"json": {"text": "tide"}}, 422, None),
    ("id with a space", "PUT", f"{DOCS}/bad%20id", {"json": {"text": "tide"}}, 422, None),
    ("id with a newline", "PUT", f"{DOCS}/doc%0A", {"json": {"text": "tide"}}, 422, None),
    ("id leading dash", "PUT", f"{DOCS}/-doc", {"json": {"text": "tide"}}, 422, None),
    ("id not ascii", "PUT", f"{DOCS}/caf%C3%A9", {"json": {"text": "tide"}}, 422, None),
    ("id percent", "PUT", f"{DOCS}/a%25b", {"json": {"text": "tide"}}, 422, None),
    (
        "unknown collection",
        "PUT",
        "/v1/collections/nope/documents/d",
        {"json": {"text": "t"}},
        404,
        "not_found",
    ),
    (
        "bad collection name",
        "PUT",
        "/v1/collections/No%20Way/documents/d",
        {"json": {"text": "t"}},
        422,
        None,
    ),
    ("delete unknown document", "DELETE", f"{DOCS}/doc-404", {}, 404, "not_found"),
    (
        "delete in unknown collection",
        "DELETE",
        "/v1/collections/nope/documents/doc-1",
        {},
        404,
        "not_found",
    ),
    ("delete malformed id", "DELETE", f"{DOCS}/{'a' * 300}", {}, 422, None),
]

BATCH_CASES: list[Case] = [
    ("malformed json", "POST", DOCS, {"content": b'[{"text": '}, 400, "malformed_json"),
    ("not utf-8", "POST", DOCS, {"content": b'[{"id": "a", "text": "\xff"}]'}, 400, "bad_encoding"),
    ("empty list", "POST", DOCS, {"json": []}, 422, "invalid_input"),
    ("object", "POST", DOCS, {"json": {}}, 422, "invalid_input"),
    ("null", "POST", DOCS, {"content": b"null"}, 422, "invalid_input"),
    ("documents not a list", "POST", DOCS, {"json": {"documents": 5}}, 422, None),
    (
        "too many items",
        "POST",
        DOCS,
        {"json": [document(i) for i in range(6)]},
        413,
        "payload_too_large",
    ),
    (
        "unknown collection",
        "POST",
        "/v1/collections/nope/documents",
        {"json": [document(1)]},
        404,
        "not_found",
    ),
    (
        "unknown collection ndjson",
        "POST",
        "/v1/collections/nope/documents",
        {
            "content": b'{"id": "a", "text": "t"}\n',
            "headers": {"content-type": "application/x-ndjson"},
        },
        404,
        "not_found",
    ),
]

COLLECTION_CASES: list[Case] = [
    ("malformed json", "POST", COLLS, {"content": b'{"name": '}, 400, "malformed_json"),
    ("not utf-8", "POST", COLLS, {"content": b'{"name": "n\xe9"}'}, 400, "bad_encoding"),
    ("duplicate", "POST", COLLS, {"json": {"name": "news"}}, 409, "conflict"),
    ("name missing", "POST", COLLS, {"json": {}}, 422, "invalid_input"),
    ("name a number", "POST", COLLS, {"json": {"name": 5}}, 422, "invalid_input"),
    ("name empty", "POST", COLLS, {"json": {"name": ""}}, 422, "invalid_input"),
    ("name upper case", "POST", COLLS, {"json": {"name": "News"}}, 422, "invalid_input"),
    ("name too long", "POST", COLLS, {"json": {"name": "n" * 65}}, 422, "invalid_input"),
    ("name with newline", "POST", COLLS, {"json": {"name": "fresh\n"}}, 422, "invalid_input"),
    ("unknown top field", "POST", COLLS, {"json": {"name": "fresh", "colour": 1}}, 422, None),
    ("body a list", "POST", COLLS, {"json": ["fresh"]}, 422, "invalid_input"),
    ("settings a string", "POST", COLLS, {"json": {"name": "fresh", "settings": "x"}}, 422, None),
    (
        "unknown setting",
        "POST",
        COLLS,
        {"json": {"name": "fresh", "settings": {"colour": 1}}},
        422,
        "invalid_input",
    ),
    (
        "neighbors too small",
        "POST",
        COLLS,
        {"json": {"name": "fresh", "settings": {"neighbors": 1}}},
        422,
        "invalid_input",
    ),
    (
        "max_df above one",
        "POST",
        COLLS,
        {"json": {"name": "fresh", "settings": {"max_df": 1.5}}},
        422,
        "invalid_input",
    ),
    (
        "unknown language",
        "POST",
        COLLS,
        {"json": {"name": "fresh", "settings": {"language": "klingon"}}},
        422,
        "invalid_input",
    ),
    (
        "groups one",
        "POST",
        COLLS,
        {"json": {"name": "fresh", "settings": {"groups": 1}}},
        422,
        None,
    ),
    (
        "groups a word",
        "POST",
        COLLS,
        {"json": {"name": "fresh", "settings": {"groups": "many"}}},
        422,
        None,
    ),
    (
        "reindex too often",
        "POST",
        COLLS,
        {"json": {"name": "fresh", "settings": {"reindex": {"every_seconds": 5}}}},
        422,
        None,
    ),
    (
        "reindex unknown",
        "POST",
        COLLS,
        {"json": {"name": "fresh", "settings": {"reindex": {"hourly": True}}}},
        422,
        None,
    ),
    ("patch malformed", "PATCH", NEWS, {"content": b"{"}, 400, "malformed_json"),
    ("patch unknown setting", "PATCH", NEWS, {"json": {"settings": {"colour": 1}}}, 422, None),
    ("patch out of range", "PATCH", NEWS, {"json": {"settings": {"vocab_size": 10}}}, 422, None),
    ("patch huge number", "PATCH", NEWS, {"json": {"settings": {"vocab_size": 10**30}}}, 422, None),
    (
        "patch reindex out of range",
        "PATCH",
        NEWS,
        {"json": {"settings": {"reindex": {"after_changes": 0}}}},
        422,
        None,
    ),
    ("patch settings null", "PATCH", NEWS, {"json": {"settings": None}}, 422, None),
    ("patch unknown top field", "PATCH", NEWS, {"json": {"name": "renamed"}}, 422, None),
    (
        "patch language with documents",
        "PATCH",
        NEWS,
        {"json": {"settings": {"language": "german"}}},
        409,
        "conflict",
    ),
    (
        "patch stemming with documents",
        "PATCH",
        NEWS,
        {"json": {"settings": {"stemming": True}}},
        409,
        "conflict",
    ),
    (
        "patch unknown collection",
        "PATCH",
        "/v1/collections/nope",
        {"json": {"settings": {"neighbors": 20}}},
        404,
        "not_found",
    ),
    ("delete unknown collection", "DELETE", "/v1/collections/nope", {}, 404, "not_found"),
]

READ_CASES: list[Case] = [
    ("unknown collection", "GET", "/v1/collections/nope", {}, 404, "not_found"),
    ("unknown document", "GET", f"{DOCS}/doc-404", {}, 404, "not_found"),
    ("document in unknown collection", "GET", "/v1/collections/nope/documents/d", {}, 404, None),
    ("list in unknown collection", "GET", "/v1/collections/nope/documents", {}, 404, None),
    ("cursor garbage", "GET", f"{DOCS}?cursor=not-a-cursor!", {}, 400, "bad_cursor"),
    ("cursor not json", "GET", f"{DOCS}?cursor=bm9wZQ", {}, 400, "bad_cursor"),
    ("cursor a list", "GET", f"{DOCS}?cursor={_cursor([1])}", {}, 400, "bad_cursor"),
    ("cursor negative", "GET", f"{DOCS}?cursor={_cursor({'after': -1})}", {}, 400, "bad_cursor"),
    ("cursor a string", "GET", f"{DOCS}?cursor={_cursor({'after': '5'})}", {}, 400, "bad_cursor"),
    ("cursor huge", "GET", f"{DOCS}?cursor={_cursor({'after': 10**30})}", {}, 400, "bad_cursor"),
    ("cursor not ascii", "GET", f"{DOCS}?cursor=%C3%A9t%C3%A9", {}, 400, "bad_cursor"),
    ("cursor too long", "GET", f"{DOCS}?cursor={'A' * 300}", {}, 422, "invalid_input"),
    ("limit zero", "GET", f"{DOCS}?limit=0", {}, 422, "invalid_input"),
    ("limit huge", "GET", f"{DOCS}?limit=1000000", {}, 422, "invalid_input"),
    ("limit a word", "GET", f"{DOCS}?limit=many", {}, 422, "invalid_input"),
    ("unknown route", "GET", "/v1/nothing-here", {}, 404, "not_found"),
    ("unknown route under a collection", "GET", f"{NEWS}/nothing", {}, 404, "not_found"),
    ("wrong method", "DELETE", COLLS, {}, 405, "method_not_allowed"),
    (
        "wrong method on a document",
        "POST",
        f"{DOCS}/doc-1",
        {"json": {}},
        405,
        "method_not_allowed",
    ),
    ("wrong method on healthz", "PUT", "/healthz", {}, 405, "method_not_allowed"),
]


BUILDS = f"{NEWS}/builds"
BUILD_CASES: list[Case] = [
    ("unknown build", "GET", f"{BUILDS}/999", {}, 404, "not_found"),
    ("malformed build id", "GET", f"{BUILDS}/abc", {}, 422, "invalid_input"),
    ("build id zero", "GET", f"{BUILDS}/0", {}, 422, "invalid_input"),
    ("build id too large", "GET", f"{BUILDS}/{10**20}", {}, 422, "invalid_input"),
    ("cancel unknown build", "DELETE", f"{BUILDS}/999", {}, 404, "not_found"),
    ("cancel malformed build id", "DELETE", f"{BUILDS}/x1", {}, 422, "invalid_input"),
    ("builds of unknown collection", "GET", "/v1/collections/nope/builds", {}, 404, None),
    ("build of unknown collection", "GET", "/v1/collections/nope/builds/1", {}, 404, None),
    ("start in unknown collection", "POST", "/v1/collections/nope/builds", {}, 404, None),
    ("cancel in unknown collection", "DELETE", "/v1/collections/nope/builds/1", {}, 404, None),
    ("start with a bad name", "POST", "/v1/collections/No%20Way/builds", {}, 422, None),
    ("index of unknown collection", "GET", "/v1/collections/nope/index", {}, 404, "not_found"),
    ("index before any build", "GET", f"{NEWS}/index", {}, 409, "no_index"),
    ("builds cursor garbage", "GET", f"{BUILDS}?cursor=not-a-cursor!", {}, 400, "bad_cursor"),
    ("builds limit zero", "GET", f"{BUILDS}?limit=0", {}, 422, "invalid_input"),
    ("builds limit huge", "GET", f"{BUILDS}?limit=100000", {}, 422, "invalid_input"),
    ("wrong method on builds", "PUT", BUILDS, {}, 405, "method_not_allowed"),
]


def _populate(client: TestClient, keys: dict[str, str]) -> None:
    new_collection(client, keys, "news")
    new_collection(client, keys, "other")
    for i in range(3):
        assert put_document(client, keys, "news", document(i)).status_code == 201
    assert put_document(client, keys, "other", document(7)).status_code == 201


def _run(client: TestClient, keys: dict[str, str], engine: Engine, cases: list[Case]) -> list[str]:
    _populate(client, keys)
    before = db_snapshot(engine)
    failures = []
    for label, method, url, kwargs, status, code in cases:
        headers = auth(keys["admin"]) | kwargs.get("headers", {})
        options = {k: v for k, v in kwargs.items() if k != "headers"}
        response = client.request(method, url, headers=headers, **options)
        try:
            assert_error(response, status, code)
        except AssertionError as exc:
            failures.append(f"{label}: {exc}")
        if db_snapshot(engine) != before:
            failures.append(f"{label}: the database changed")
            before = db_snapshot(engine)
    return failures


@pytest.mark.parametrize(
    "cases",
    [DOCUMENT_CASES, BATCH_CASES, COLLECTION_CASES, READ_CASES, BUILD_CASES],
    ids=["document", "batch", "collection", "read", "build"],
)
def test_bad_input_is_refused_and_changes_nothing(
    small_client: TestClient, keys: dict[str, str], engine: Engine, cases: list[Case]
) -> None:
    failures = _run(small_client, keys, engine, cases)
    assert not failures, "\n".join(failures)


def test_allowed_settings_change_with_documents(
    small_client: TestClient, keys: dict[str, str]
) -> None:
    """Only tokenisation is locked by stored documents; the rest may change."""
    _populate(small_client, keys)
    response = small_client.patch(
        NEWS,
        json={"settings": {"neighbors": 30, "reindex": {"after_changes": 100}}},
        headers=auth(keys["admin"]),
    )
    assert response.status_code == 200, response.text
    settings = response.json()["settings"]
    assert settings["neighbors"] == 30
    assert settings["reindex"] == {"every_seconds": None, "after_changes": 100}
    assert settings["language"] == "english"


def test_tokenisation_may_change_while_empty(
    small_client: TestClient, keys: dict[str, str]
) -> None:
    new_collection(small_client, keys, "empty")
    response = small_client.patch(
        "/v1/collections/empty",
        json={"settings": {"language": "german", "stemming": True}},
        headers=auth(keys["admin"]),
    )
    assert response.status_code == 200, response.text
    assert response.json()["settings"]["language"] == "german"
    assert response.json()["settings"]["stemming"] is True


def test_method_not_allowed_names_the_allowed_methods(small_client: TestClient) -> None:
    response = small_client.delete(COLLS)
    assert_error(response, 405, "method_not_allowed")
    assert set(response.headers["allow"].replace(" ", "").split(",")) == {"GET", "POST"}


def _failing_app(exc: Exception) -> TestClient:
    from fastapi import FastAPI

    from service.api.errors import install_error_handlers

    app = FastAPI()
    install_error_handlers(app)

    @app.get("/fail")
    def fail() -> None:
        raise exc

    return TestClient(app, raise_server_exceptions=False)


@pytest.mark.parametrize(
    ("exc", "status", "code"),
    [
        (
            OperationalError("SELECT 1", {}, Exception("server closed the connection")),
            503,
            "unavailable",
        ),
        (
            InterfaceError("SELECT 1", {}, Exception("connection already closed")),
            503,
            "unavailable",
        ),
        (PoolTimeoutError("QueuePool limit reached"), 503, "unavailable"),
        (IntegrityError("INSERT", {}, Exception("UNIQUE constraint failed")), 409, "conflict"),
        (ProgrammingError("SELEC", {}, Exception("syntax error")), 500, "internal"),
        (DataError("INSERT", {}, Exception("value too long")), 500, "internal"),
    ],
)
def test_driver_errors_map_to_what_they_mean(exc: Exception, status: int, code: str) -> None:
    response = _failing_app(exc).get("/fail")
    assert response.status_code == status
    body = response.json()
    assert body["error"]["code"] == code
    assert "syntax" not in body["error"]["message"]  # driver text is logged, not sent
