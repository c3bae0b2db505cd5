"""The fast path (service.api.fast_path) answers exactly as the FastAPI routes do.

Every request is sent to two apps on the same database and index: one with the fast path,
one without. Status, content type and body bytes must be equal, for plain requests (which
the fast path answers itself: its counter proves it) and for every kind of request it
must hand on (bad parameters, unknown ids, keys it has not seen, bodies it cannot read).
"""

from __future__ import annotations

import sqlite3
from collections.abc import Iterator
from typing import Any

import pytest
from sqlalchemy import Engine

from service.api.app import create_app
from service.config import Settings
from service.pipeline.keys import create_key, revoke_key
from service.storage.session import make_session_factory
from tests.factories import TestClient, auth, make_keys
from tests.query_fixtures import BuiltCollection, built_collection

C = "stdlib"
BASE = f"/v1/collections/{C}"


@pytest.fixture
def built(engine: Engine) -> BuiltCollection:
    return built_collection(engine, C)


def _client(engine: Engine, database_url: str, *, fast_path: bool) -> TestClient:
    # Keys are remembered for a minute: the fast path only trusts a remembered key.
    settings = Settings(
        database_url=database_url, auth_cache_seconds=60, max_body_bytes=4096, max_text_bytes=2048
    )
    app = create_app(settings, engine=engine, fast_path=fast_path)
    return TestClient(app, raise_server_exceptions=False)


@pytest.fixture
def pair(
    engine: Engine, database_url: str, built: BuiltCollection
) -> Iterator[tuple[TestClient, TestClient, dict[str, str]]]:
    keys = make_keys(engine)
    with (
        _client(engine, database_url, fast_path=True) as fast,
        _client(engine, database_url, fast_path=False) as plain,
    ):
        for client in (fast, plain):  # both verify the keys once and load the index
            for scope in ("read", "write"):
                warm = client.get(
                    f"{BASE}/documents/decimal-0/neighbors", headers=auth(keys[scope])
                )
                assert warm.status_code == 200, warm.text
        fast.app.state.fast_path.answered = fast.app.state.fast_path.declined = 0  # type: ignore[attr-defined]
        yield fast, plain, keys


def _same(fast: TestClient, plain: TestClient, method: str, url: str, **kw: Any) -> Any:
    a = fast.request(method, url, **kw)
    b = plain.request(method, url, **kw)
    assert a.status_code == b.status_code, (url, a.text, b.text)
    assert a.headers.get("content-type") == b.headers.get("content-type"), url
    assert a.content == b.content, (url, a.text[:300], b.text[:300])
    return a


def _counts(client: TestClient) -> tuple[int, int]:
    counts = client.app.state.fast_path  # type: ignore[attr-defined]
    return counts.answered, counts.declined


PLAIN_GETS = [
    f"{BASE}/documents/decimal-3/neighbors",
    f"{BASE}/documents/decimal-3/neighbors?k=5",
    f"{BASE}/documents/logging-7/neighbors?k=200&t=2.5",
    f"{BASE}/documents/tarfile-1/neighbors?t=0.5&k=1",
    f"{BASE}/documents/tarfile-1/neighbors?k=05",
    f"{BASE}/distance?from=decimal-3&to=decimal-4",
    f"{BASE}/distance?from=decimal-3&to=decimal-4&to=logging-2&to=decimal-3&t=3",
]


def test_plain_reads_are_answered_by_the_fast_path_identically(
    pair: tuple[TestClient, TestClient, dict[str, str]],
) -> None:
    fast, plain, keys = pair
    for url in PLAIN_GETS:
        response = _same(fast, plain, "GET", url, headers=auth(keys["read"]))
        assert response.status_code == 200, response.text
    drafts = [
        {"text": "a thread waits on a lock and a condition variable"},
        {"text": "log records go to handlers", "title": "On logging", "k": 3, "t": 2},
    ]
    for body in drafts:
        response = _same(
            fast, plain, "POST", f"{BASE}/similar", json=body, headers=auth(keys["read"])
        )
        assert response.status_code == 200 and response.json()["neighbors"], response.text
    # A write or admin key may read as well.
    _same(fast, plain, "GET", PLAIN_GETS[1], headers=auth(keys["write"]))
    assert _counts(fast) == (len(PLAIN_GETS) + len(drafts) + 1, 0)


HANDED_ON_GETS = [
    f"{BASE}/documents/decimal-3/neighbors?k=0",
    f"{BASE}/documents/decimal-3/neighbors?k=201",
    f"{BASE}/documents/decimal-3/neighbors?k=abc",
    f"{BASE}/documents/decimal-3/neighbors?k=%2B5",
    f"{BASE}/documents/decimal-3/neighbors?k=3&k=4",
    f"{BASE}/documents/decimal-3/neighbors?t=0",
    f"{BASE}/documents/decimal-3/neighbors?t=nan",
    f"{BASE}/documents/decimal-3/neighbors?t=1e2",
    f"{BASE}/documents/decimal-3/neighbors?t=1001",
    f"{BASE}/documents/decimal-3/neighbors?colour=blue",
    f"{BASE}/documents/no-such-document/neighbors",
    "/v1/collections/no-such-collection/documents/decimal-3/neighbors",
    "/v1/collections/Bad%20Name!/documents/decimal-3/neighbors",
    f"{BASE}/distance?from=decimal-3",
    f"{BASE}/distance?to=decimal-3",
    f"{BASE}/distance?from=decimal-3&from=decimal-4&to=logging-1",
    f"{BASE}/distance?from={'x' * 257}&to=decimal-4",
    f"{BASE}/distance?from=decimal-3&" + "&".join(f"to=decimal-{i % 40}" for i in range(101)),
    f"{BASE}/distance?from=decimal-3&to=no-such-document",
    f"{BASE}/distance?from=decimal-3&to=decimal-4&t=-1",
    f"{BASE}/distance?from=%FF&to=decimal-4",
]


def test_requests_it_must_not_answer_get_the_routes_answer(
    pair: tuple[TestClient, TestClient, dict[str, str]],
) -> None:
    fast, plain, keys = pair
    statuses = set()
    for url in HANDED_ON_GETS:
        statuses.add(_same(fast, plain, "GET", url, headers=auth(keys["read"])).status_code)
    assert statuses >= {404, 422}
    # "t=1e2" is valid but not in the fast path's simplest form; the rest are errors.
    assert _counts(fast) == (0, len(HANDED_ON_GETS))


def test_keys_it_has_not_verified_are_checked_by_the_route(
    pair: tuple[TestClient, TestClient, dict[str, str]],
) -> None:
    fast, plain, keys = pair
    url = PLAIN_GETS[0]
    for headers in ({}, auth("not-a-key"), {"Authorization": f"Basic {keys['read']}"}):
        response = _same(fast, plain, "GET", url, headers=headers)
        assert response.status_code == 401
    assert _counts(fast)[0] == 0


BAD_BODIES: list[dict[str, Any]] = [
    {"content": b"{not json"},
    {"content": b""},
    {"content": b"\xff\xfe"},
    {"json": {"text": ""}},
    {"json": {"text": "a lock", "extra": 1}},
    {"json": {"text": "a lock", "k": 0}},
    {"json": {"text": 5}},
    {"json": {"text": "a lock", "t": 0}},
    {"json": {"text": "x " * 1500}},  # over max_text_bytes
    {"content": b'{"text": "' + b"y" * 5000 + b'"}'},  # over max_body_bytes
    {"json": {"text": "zzzqqq xxyyzz"}},  # no term of the vocabulary
    {"json": ["a list"]},
]


def test_similar_bodies_it_cannot_take_are_replayed_to_the_route(
    pair: tuple[TestClient, TestClient, dict[str, str]],
) -> None:
    fast, plain, keys = pair
    statuses = set()
    for body in BAD_BODIES:
        headers = auth(keys["read"]) | (
            {"content-type": "application/json"} if "content" in body else {}
        )
        statuses.add(
            _same(fast, plain, "POST", f"{BASE}/similar", headers=headers, **body).status_code
        )
    assert statuses >= {400, 413, 422}
    assert _counts(fast) == (0, len(BAD_BODIES))


def test_a_body_sent_in_chunks_is_read_whole(
    pair: tuple[TestClient, TestClient, dict[str, str]],
) -> None:
    fast, plain, keys = pair
    parts = [b'{"text": "a thread', b" waits on a lock", b'", "k": 4}']
    answers = []
    for client in (fast, plain):
        response = client.post(f"{BASE}/similar", content=iter(parts), headers=auth(keys["read"]))
        assert response.status_code == 200, response.text
        answers.append(response.content)
    assert answers[0] == answers[1]
    assert _counts(fast) == (1, 0)


def test_a_deletion_is_seen_by_the_next_fast_answer(
    pair: tuple[TestClient, TestClient, dict[str, str]],
) -> None:
    fast, plain, keys = pair
    url = f"{BASE}/documents/threading-2/neighbors?k=5"
    before = fast.get(url, headers=auth(keys["read"])).json()["neighbors"]
    gone = before[0]["id"]
    deleted = fast.delete(f"{BASE}/documents/{gone}", headers=auth(keys["write"]))
    assert deleted.status_code == 204
    # The change count moved: the first answer after it comes from the route (it
    # refreshes the live index), the next from the fast path; neither has the document.
    for _ in range(2):
        after = _same(fast, plain, "GET", url, headers=auth(keys["read"])).json()["neighbors"]
        assert gone not in {n["id"] for n in after} and len(after) == 5
    assert _counts(fast) == (2, 1)  # before; after the refresh (the route did that one)


def test_an_expired_key_is_checked_again_by_the_fast_path_itself(
    engine: Engine, database_url: str, built: BuiltCollection
) -> None:
    # With nothing remembered (ttl 0) every request reads the key directly: the fast path
    # still answers, and a revoked key is refused on the very next request.
    with make_session_factory(engine)() as session:
        raw, info = create_key(session, "reader", "read")
    settings = Settings(database_url=database_url, auth_cache_seconds=0)
    with TestClient(create_app(settings, engine=engine), raise_server_exceptions=False) as fast:
        url = PLAIN_GETS[0]
        assert fast.get(url, headers=auth(raw)).status_code == 200  # loads the index
        fast.app.state.fast_path.answered = fast.app.state.fast_path.declined = 0  # type: ignore[attr-defined]
        assert fast.get(url, headers=auth(raw)).status_code == 200
        assert _counts(fast) == (1, 0)
        with make_session_factory(engine)() as session:
            revoke_key(session, info.id)
        refused = fast.get(url, headers=auth(raw))
        assert refused.status_code == 401, refused.text
        assert _counts(fast) == (1, 1)


def test_a_driver_error_in_the_fast_checks_is_handed_to_the_route(
    pair: tuple[TestClient, TestClient, dict[str, str]], monkeypatch: pytest.MonkeyPatch
) -> None:
    fast, plain, keys = pair

    def broken(raw: str) -> str | None:
        raise sqlite3.OperationalError("disk I/O error")

    monkeypatch.setattr(fast.app.state.key_verifier, "scope_now", broken)  # type: ignore[attr-defined]
    response = _same(fast, plain, "GET", PLAIN_GETS[0], headers=auth(keys["read"]))
    assert response.status_code == 200
    assert _counts(fast) == (0, 1)
