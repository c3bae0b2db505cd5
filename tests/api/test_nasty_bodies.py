"""No bad input produces a 5xx: nasty bodies and content types thrown at every write route.

Every answer must be below 500 and, when it is an error, have the one error shape. What
was accepted must still read back afterwards (a stored value that breaks a later GET is
a 5xx waiting to happen), and the term table must still match the stored vectors.
"""

from __future__ import annotations

import json
from typing import Any
from urllib.parse import quote

import pytest
from sqlalchemy import Engine

from tests.factories import (
    TestClient,
    assert_error,
    auth,
    document,
    frequency_recount,
    new_collection,
    put_document,
)


def _deep_list(n: int) -> bytes:
    return b"[" * n + b"]" * n


def _deep_dict(n: int) -> Any:
    value: Any = 1
    for _ in range(n):
        value = {"a": value}
    return value


RAW_BODIES: list[tuple[str, bytes]] = [
    ("null", b"null"),
    ("empty list", b"[]"),
    ("empty object", b"{}"),
    ("empty body", b""),
    ("blank", b" \n\t "),
    ("string", b'"text"'),
    ("empty string", b'""'),
    ("number", b"-0"),
    ("true", b"true"),
    ("list of nulls", b"[null, null]"),
    ("list of lists", b"[[], [[]], [[[]]]]"),
    ("list of empty objects", b"[{}, {}]"),
    ("documents null", b'{"documents": null}'),
    ("documents object", b'{"documents": {"id": "a", "text": "t"}}'),
    ("huge integer", b"1" * 5000),
    ("huge float", b"1e400"),
    ("NaN", b"NaN"),
    ("Infinity in an object", b'{"text": Infinity, "id": "a"}'),
    ("deeply nested list", _deep_list(100_000)),
    ("nested list", _deep_list(900)),
    ("deeply nested object", b'{"a":' * 20_000 + b"1" + b"}" * 20_000),
    ("byte-order mark", b'\xef\xbb\xbf{"text": "t"}'),
    ("utf-16", '{"text": "tide"}'.encode("utf-16")),
    ("latin-1", b'{"id": "a", "text": "caf\xe9"}'),
    ("every byte", bytes(range(256))),
    ("truncated", b'{"id": "a", "text": "t'),
    ("two values", b'{"id": "a", "text": "t"} {"id": "b"}'),
    ("lone surrogate", b'{"id": "a", "text": "\\ud800"}'),
    ("surrogate key", b'{"\\udfff": 1, "name": "x"}'),
    ("ndjson lines", b'{"id": "a", "text": "t"}\n{"id": "b", "text": "u"}\n'),
]

ALL_TYPES = {"null", "empty object", "ndjson lines", "latin-1", "every byte", "list of nulls"}
CONTENT_TYPES = [
    "application/json",
    "application/x-ndjson",
    "text/plain",
    "multipart/form-data; boundary=x",
    "application/x-www-form-urlencoded",
    None,
]

FIELD_VALUES: list[Any] = [
    None,
    True,
    0,
    10**40,
    -(10**30),
    1e308,
    "",
    [],
    [[[]]],
    {},
    {"a": [1, {"b": None}]},
    "\u0000",
    "a\u0000b",
    "\ud800",
    "\ufeff",
    "\uffff",
    "\U0010ffff",
    "9" * 1000,
]

UNICODE_TEXTS = [
    "🌊" * 300,
    "مرحبا بالعالم، المد والجزر",
    "\u200b\u200c\u200d\u2060",
    "Z̤͔ͧ̑̓ä͖̭̈̇lͮ̒ͫǧ̗͚̚o̙̔ͮ̇͐̇ harbour",
    "\u0301" * 200,
    "İstanbul ﬁsh ＡＢＣ ²³ Straße",
    "東京都の港" * 100,
    "a" * 5000,
    "word " * 10 + "x" * 41,
    "\r\n" * 100 + "tide",
    "<script>alert(1)</script> ' OR 1=1; --",
    "%s %d {0} ${x} \\x00 \\u0000",
]

DATES = [
    "0001-01-01T00:00:00+14:00",
    "9999-12-31T23:59:59-14:00",
    "0000-01-01",
    "2021-02-30",
    "2021-03-04T25:00:00",
    "2021-03-04T10:00:00+24:00",
    "20210304",
    "2021-W09-4",
    "\u0000",
    "",
    "9" * 1000,
]


def _show(value: Any) -> str:
    return repr(value)[:60]


def document_variants() -> list[tuple[str, dict[str, Any]]]:
    """(label, document object) with one nasty field each (ids numbered so they differ)."""
    out: list[tuple[str, dict[str, Any]]] = []

    def add(label: str, prefix: str, doc: dict[str, Any]) -> None:
        out.append((label, {"id": f"{prefix}{len(out)}", "text": "Harbour tide."} | doc))

    for value in FIELD_VALUES:
        for name in ("id", "title", "text", "metadata", "published_at"):
            add(f"{name}={value!r:.60}", "f", {name: value})
    for text in UNICODE_TEXTS:
        add(f"text={text!r:.60}", "u", {"title": text[:100], "text": text})
    for date in DATES:
        add(f"published_at={date!r:.60}", "d", {"published_at": date})
    for label, meta in [
        ("NUL key", {"\u0000": 1}),
        ("surrogate key", {"\ud800": 1}),
        ("NUL value", {"k": "\u0000"}),
        ("huge integer", {"n": 10**300}),
        ("200 levels", {"deep": _deep_dict(200)}),
        ("900 levels", {"deeper": _deep_dict(900)}),
        ("70 kB", {"big": "x" * 70_000}),
        ("empty keys", {"": {"": [None, True, -1.5e-300]}}),
    ]:
        add(f"metadata {label}", "m", {"metadata": meta})
    for label, extra in [
        ("unknown field", {"colour": "red"}),
        ("id of 10,000", {"id": "a" * 10_000}),
        ("id with slash", {"id": "a/b"}),
        ("id with dash first", {"id": "-a"}),
    ]:
        add(label, "x", extra)
    return out


SETTINGS_VARIANTS: list[Any] = [
    None,
    [],
    "english",
    {"\ud800": 1},
    {"\u0000": 1},
    {"vocab_size": 10**300},
    {"vocab_size": 1e308},
    {"max_df": -1e-308},
    {"groups": 10**30},
    {"groups": None},
    {"groups": "auto\u0000"},
    {"reindex": [[[]]]},
    {"reindex": {"every_seconds": 1e308}},
    {"reindex": {"after_changes": "many"}},
    {"language": "\u0000"},
    {"language": None},
    {"language": ["english"]},
    {"language": "english" * 1000},
    {"stemming": "yes"},
    {"alpha": -0.0},
    {"neighbors": True},
    {"deep": _deep_dict(500)},
]


def _dumps(value: Any) -> bytes:
    return json.dumps(value).encode()


def _requests(route: str) -> list[tuple[str, str, str, bytes, str | None]]:
    """(label, method, url, body, content type) for one route."""
    out: list[tuple[str, str, str, bytes, str | None]] = []
    urls = {
        "put document": ("PUT", "/v1/collections/news/documents/doc-7"),
        "post documents": ("POST", "/v1/collections/news/documents"),
        "post collection": ("POST", "/v1/collections"),
        "patch collection": ("PATCH", "/v1/collections/news"),
        # Bodies mean nothing to the deletes, which must ignore them.
        "delete document": ("DELETE", "/v1/collections/news/documents/doc-7"),
        "delete collection": ("DELETE", "/v1/collections/gone"),
    }
    method, url = urls[route]
    for label, body in RAW_BODIES:
        # Every body as JSON and without a type; a few under every content type.
        types = CONTENT_TYPES if label in ALL_TYPES else ["application/json", None]
        if method == "DELETE" and label not in ALL_TYPES:
            continue
        for content_type in types:
            out.append((f"{label} as {content_type}", method, url, body, content_type))
    if route == "put document":
        for label, doc in document_variants():
            fields = {k: v for k, v in doc.items() if k != "id"}
            out.append((f"document {label}", method, url, _dumps(fields), None))
            ident = doc["id"] if isinstance(doc["id"], str) else "doc-7"
            raw_id = ident[:300].encode("utf-8", "surrogatepass")
            path = f"/v1/collections/news/documents/{quote(raw_id, safe='')}"
            out.append((f"document at its id, {label}", method, path, _dumps(doc), None))
    elif route == "post documents":
        docs = [doc for _, doc in document_variants()]
        for label, doc in document_variants():
            out.append((f"list of {label}", method, url, _dumps([doc]), None))
        ndjson = b"\n".join(_dumps(d) for d in docs)
        out.append(("all variants as ndjson", method, url, ndjson, "application/x-ndjson"))
        for start in range(0, len(docs), 5):
            chunk = _dumps({"documents": docs[start : start + 5]})
            out.append((f"wrapped list from {start}", method, url, chunk, None))
    elif route == "post collection":
        for i, settings in enumerate(SETTINGS_VARIANTS):
            body = _dumps({"name": f"c{i}", "settings": settings})
            out.append((f"settings {_show(settings)}", method, url, body, None))
        for name in [None, "", "\u0000", "\ud800", "a" * 10_000, ["x"], 5, "ok\n", "ÄÖ"]:
            out.append((f"name {name!r:.40}", method, url, _dumps({"name": name}), None))
    elif route == "patch collection":
        for settings in SETTINGS_VARIANTS:
            body = _dumps({"settings": settings})
            out.append((f"settings {_show(settings)}", method, url, body, None))
    return out


ROUTES = [
    "put document",
    "post documents",
    "post collection",
    "patch collection",
    "delete document",
    "delete collection",
]


@pytest.mark.parametrize("route", ROUTES)
def test_nasty_bodies_never_produce_a_server_error(
    client: TestClient, keys: dict[str, str], engine: Engine, route: str
) -> None:
    new_collection(client, keys, "news")
    put_document(client, keys, "news", document(1))
    failures: list[str] = []
    for label, method, url, body, content_type in _requests(route):
        headers = auth(keys["admin"])
        if content_type is not None:
            headers["content-type"] = content_type
        response = client.request(method, url, content=body, headers=headers)
        if response.status_code >= 500:
            failures.append(f"{label}: {response.status_code} {response.text[:200]}")
        elif response.status_code >= 400:
            try:
                assert_error(response, response.status_code)
            except AssertionError as exc:
                failures.append(f"{label}: bad error shape {exc}")
        else:
            assert response.headers["content-type"].startswith("application/json"), label
    failures += _read_back(client, keys, engine)
    assert not failures, f"{len(failures)} failures:\n" + "\n".join(failures[:40])


def _read_back(client: TestClient, keys: dict[str, str], engine: Engine) -> list[str]:
    """Everything stored must read back without a server error."""
    failures = []
    read = auth(keys["read"])
    if client.get("/readyz", headers=read).status_code != 200:
        failures.append("/readyz is not 200 afterwards")
    listing = client.get("/v1/collections", headers=read)
    if listing.status_code != 200:
        return [*failures, f"listing collections: {listing.status_code}"]
    for coll in listing.json()["items"]:
        name = coll["name"]
        if client.get(f"/v1/collections/{name}", headers=read).status_code != 200:
            failures.append(f"collection {name!r} does not read back")
        cursor = None
        while True:
            params = {"limit": 50} | ({"cursor": cursor} if cursor else {})
            page = client.get(f"/v1/collections/{name}/documents", params=params, headers=read)
            if page.status_code != 200:
                failures.append(f"listing {name!r}: {page.status_code} {page.text[:200]}")
                break
            for item in page.json()["items"]:
                one = client.get(f"/v1/collections/{name}/documents/{item['id']}", headers=read)
                if one.status_code != 200:
                    failures.append(f"document {item['id']!r:.60}: {one.status_code}")
            cursor = page.json()["next_cursor"]
            if not cursor:
                break
        table, recount = frequency_recount(engine, name)
        if table != recount:
            failures.append(f"collection {name!r}: term table differs from the vectors")
    return failures
