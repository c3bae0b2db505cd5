"""The Python client (service/client) against the real app through TestClient: collections,
documents, builds (a real worker thread with the real geometry), errors, and its imports.
The queries, groups and the map are in test_client_queries.py."""

from __future__ import annotations

import ast
import subprocess
import sys
from collections.abc import Iterator
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

import httpx
import pytest
from sqlalchemy import Engine

import service.client as client_package
from service.client import (
    AuthError,
    BuildFailedError,
    BuildTimeoutError,
    ConflictError,
    InvalidInputError,
    MalformedRequestError,
    NotFoundError,
    PayloadTooLargeError,
    PermissionDeniedError,
    ResponseShapeError,
    ServerError,
    TidemapApiError,
    TidemapClient,
    TidemapClientError,
)
from service.pipeline.index_content import compute_index
from service.worker.embedded import EmbeddedWorker
from service.worker.worker import WorkerOptions
from tests.build_factories import factory
from tests.factories import TestClient, auth, document
from tests.query_fixtures import stdlib_documents

BASE = "http://testserver"
CLIENT_DIR = Path(client_package.__file__).resolve().parent


def tidemap(http: TestClient, key: str) -> TidemapClient:
    return TidemapClient(BASE, key, http=http)


@pytest.fixture
def admin(client: TestClient, keys: dict[str, str]) -> TidemapClient:
    return tidemap(client, keys["admin"])


@pytest.fixture
def worker_thread(engine: Engine) -> Iterator[EmbeddedWorker]:
    """A build worker thread with the real geometry, as `tidemap serve` runs with SQLite."""
    options = WorkerOptions(poll_seconds=0.05, retry_seconds=0.0, schedule=False)
    embedded = EmbeddedWorker(factory(engine), options, compute=compute_index).start()
    yield embedded
    embedded.stop(timeout=30)


# --- the package itself ---------------------------------------------------------------------


def _imports(path: Path) -> list[tuple[str, int]]:
    """(module, level) of every import in the file."""
    out: list[tuple[str, int]] = []
    for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
        if isinstance(node, ast.Import):
            out.extend((alias.name, 0) for alias in node.names)
        elif isinstance(node, ast.ImportFrom):
            out.append((node.module or "", node.level))
    return out


def test_the_client_imports_only_httpx_and_the_standard_library() -> None:
    files = sorted(CLIENT_DIR.glob("*.py"))
    assert len(files) >= 5, files
    bad = []
    for path in files:
        for name, level in _imports(path):
            top = name.split(".")[0]
            ours = name == "service.client" or name.startswith("service.client.")
            if level or not (ours or top == "httpx" or top in sys.stdlib_module_names):
                bad.append(f"{path.name}: {'.' * level}{name}")
    assert not bad, bad


def test_importing_the_client_loads_no_server_code() -> None:
    # A fresh interpreter: this test process has the server loaded already.
    probe = (
        "import sys, service.client\n"
        "heavy = ('service.api', 'service.pipeline', 'service.storage', 'service.geometry',"
        " 'service.errors', 'service.config', 'fastapi', 'sqlalchemy', 'numpy', 'pydantic')\n"
        "print(sorted(m for m in sys.modules if m.startswith(heavy)))\n"
    )
    out = subprocess.run(
        [sys.executable, "-c", probe], capture_output=True, text=True, check=True, timeout=60
    )
    assert out.stdout.strip() == "[]", out.stdout


def test_all_lists_exactly_the_public_names() -> None:
    public = {n for n in vars(client_package) if not n.startswith("_")}
    assert client_package.__all__ == sorted(client_package.__all__)
    assert set(client_package.__all__) == public


def test_a_key_is_needed_and_never_shown() -> None:
    with pytest.raises(ValueError, match="API key"):
        TidemapClient(BASE, "")
    with TidemapClient(BASE + "/", "secret-key-123") as owned:
        assert owned.base_url == BASE and "secret-key-123" not in repr(owned)


def test_a_given_http_client_is_left_open_and_an_owned_one_closed() -> None:
    given = httpx.Client(transport=httpx.MockTransport(lambda _: httpx.Response(204)))
    with TidemapClient(BASE, "k", http=given) as tm:
        tm.delete_document("news", "doc-1")
    assert not given.is_closed
    given.close()
    owned = TidemapClient(BASE, "k", timeout=1.5)
    http = owned._conn._http
    assert http.timeout == httpx.Timeout(1.5) and not http.is_closed
    owned.close()
    assert http.is_closed


# --- collections -----------------------------------------------------------------------------


def test_collections_round_trip(
    client: TestClient, keys: dict[str, str], admin: TidemapClient
) -> None:
    made = admin.create_collection("news", {"neighbors": 7, "reindex": {"after_changes": 50}})
    assert (made.name, made.documents, made.settings["neighbors"]) == ("news", 0, 7)
    assert made.settings["reindex"]["after_changes"] == 50
    assert made.settings["min_df"] == 2  # defaults filled in
    assert isinstance(made.created_at, datetime) and made.created_at.tzinfo is not None
    raw = client.get("/v1/collections/news", headers=auth(keys["read"])).json()
    assert admin.get_collection("news").raw == raw
    admin.create_collection("archive")
    assert [c.name for c in admin.list_collections()] == ["archive", "news"]

    changed = admin.update_collection("news", {"alpha": 0.5})
    assert (changed.settings["alpha"], changed.settings["neighbors"]) == (0.5, 7)
    with pytest.raises(InvalidInputError) as bad:
        admin.update_collection("news", {"neighbors": 1})
    assert bad.value.status == 422 and "neighbors" in str(bad.value.details)
    with pytest.raises(ConflictError) as twice:
        admin.create_collection("news")
    assert twice.value.status == 409

    admin.delete_collection("news")
    with pytest.raises(NotFoundError) as gone:
        admin.get_collection("news")
    assert (gone.value.status, gone.value.code) == (404, "not_found")
    assert gone.value.details == {"collection": "news"}
    assert [c.name for c in admin.list_collections()] == ["archive"]


def test_auth_errors(client: TestClient, keys: dict[str, str]) -> None:
    with pytest.raises(AuthError) as unknown:
        tidemap(client, "not-a-key").list_collections()
    assert (unknown.value.status, unknown.value.code) == (401, "unauthenticated")
    assert not isinstance(unknown.value, PermissionDeniedError)
    with pytest.raises(PermissionDeniedError) as small:
        tidemap(client, keys["read"]).create_collection("news")
    assert (small.value.status, small.value.code) == (403, "forbidden")
    assert small.value.details == {"granted": "read", "needed": "admin"}
    assert isinstance(small.value, AuthError)  # one except clause catches both


# --- documents -------------------------------------------------------------------------------


def test_documents_put_get_batch_delete(client: TestClient, keys: dict[str, str]) -> None:
    tidemap(client, keys["admin"]).create_collection("news")
    tm = tidemap(client, keys["write"])
    when = datetime(2021, 3, 4, 10, 0, tzinfo=UTC)
    first = tm.put_document("news", "doc-1", "harbour tides", title="Tides", published_at=when)
    assert (first.id, first.status) == ("doc-1", "inserted")
    same = tm.put_document("news", "doc-1", "harbour tides", title="Tides", published_at=when)
    assert same.status == "unchanged"
    assert tm.put_document("news", "doc-1", "harbour tides", metadata={"n": 1}).status == "updated"
    got = tm.get_document("news", "doc-1")
    assert (got.text, got.title, got.metadata, got.published_at) == (
        "harbour tides",
        "",
        {"n": 1},
        None,
    )
    assert got.status == "ok" and got.n_terms == 2 and len(got.content_hash) == 64

    batch = tm.upsert_documents(
        "news",
        [
            {"id": "doc-2", "text": "council vote", "published_at": when},
            {"id": "bad id!", "text": "x"},
            {"id": "doc-1", "text": "harbour tides", "metadata": {"n": 1}},
        ],
    )
    assert (batch.inserted, batch.updated, batch.unchanged, batch.rejected) == (1, 0, 1, 1)
    assert [(i.index, i.id, i.status) for i in batch.items] == [
        (0, "doc-2", "inserted"),
        (1, "bad id!", "rejected"),
        (2, "doc-1", "unchanged"),
    ]
    assert batch.rejected_items[0].error is not None
    assert batch.rejected_items[0].error["code"] == "invalid_input"
    assert tm.get_document("news", "doc-2").published_at == when

    streamed = tm.upsert_documents_ndjson(
        "news", ({"id": f"s-{i}", "text": f"stream item {i}"} for i in range(7))
    )
    assert (streamed.inserted, streamed.rejected, streamed.items) == (7, 0, ())
    with_bad = tm.upsert_documents_ndjson("news", [{"id": "s-0", "text": "new"}, {"text": "no id"}])
    assert (with_bad.updated, with_bad.rejected) == (1, 1)
    assert [(i.index, i.status) for i in with_bad.items] == [(2, "rejected")]

    tm.delete_document("news", "doc-2")
    with pytest.raises(NotFoundError):
        tm.get_document("news", "doc-2")
    with pytest.raises(NotFoundError):
        tm.delete_document("news", "doc-2")
    with pytest.raises(NotFoundError):
        tm.put_document("nowhere", "doc-1", "text")


def test_listing_follows_the_cursor_across_pages(client: TestClient, keys: dict[str, str]) -> None:
    tidemap(client, keys["admin"]).create_collection("news")
    tm = tidemap(client, keys["write"])
    tm.upsert_documents("news", [document(i) for i in range(11)])
    tm.delete_document("news", "doc-4")
    everything = client.get("/v1/collections/news/documents?limit=1000", headers=auth(keys["read"]))
    expected = [d["id"] for d in everything.json()["items"]]
    assert len(expected) == 10 and "doc-4" not in expected

    page = tm.list_documents("news", limit=4)
    assert len(page.items) == 4 and page.next_cursor is not None
    second = tm.list_documents("news", limit=4, cursor=page.next_cursor)
    assert [d.id for d in page.items + second.items] == expected[:8]
    for size in (1, 3, 10, 1000):
        assert [d.id for d in tm.iter_documents("news", page_size=size)] == expected, size
    assert next(tm.iter_documents("news")).metadata == {"n": 0}
    with pytest.raises(MalformedRequestError) as bad:
        tm.list_documents("news", cursor="not-a-cursor")
    assert (bad.value.status, bad.value.code) == (400, "bad_cursor")
    with pytest.raises(InvalidInputError):
        tm.list_documents("news", limit=0)


def test_too_large_batches(small_client: TestClient, keys: dict[str, str]) -> None:
    tidemap(small_client, keys["admin"]).create_collection("news")
    tm = tidemap(small_client, keys["write"])
    with pytest.raises(PayloadTooLargeError) as big:
        tm.upsert_documents("news", [document(i) for i in range(6)])
    assert big.value.status == 413 and big.value.details == {"items": 6, "limit": 5}
    assert tm.list_documents("news").items == ()  # nothing stored


# --- builds ----------------------------------------------------------------------------------


def _archive(client: TestClient, keys: dict[str, str], docs: list[dict[str, Any]]) -> None:
    tidemap(client, keys["admin"]).create_collection("stdlib")
    result = tidemap(client, keys["write"]).upsert_documents("stdlib", docs)
    assert result.inserted == len(docs) and result.rejected == 0


def test_build_waited_for_then_queried(
    client: TestClient, keys: dict[str, str], worker_thread: EmbeddedWorker
) -> None:
    docs, _ = stdlib_documents()
    _archive(client, keys, docs)
    tm = tidemap(client, keys["write"])
    started = tm.start_build("stdlib")
    assert (started.state, started.existing, started.trigger, started.version) == (
        "queued",
        False,
        "api",
        None,
    )
    done = tm.wait_for_build("stdlib", started.id, timeout=120, poll=0.05)
    assert (done.id, done.state, done.version, done.progress) == (started.id, "succeeded", 1, 1.0)
    assert done.finished and done.succeeded and done.existing is None
    assert done.statistics["documents"] == len(docs) and done.timings["publish"] >= 0
    assert done.finished_at is not None and done.started_at is not None

    summary = tm.index("stdlib")
    assert (summary.version, summary.documents, summary.staleness.total) == (1, len(docs), 0)
    assert summary.eigenvalues is not None and summary.eigenvalues[0] == pytest.approx(1.0)
    assert summary.groups is not None and summary.groups >= 2 and summary.building is None
    found = tm.neighbors("stdlib", docs[0]["id"], k=3)
    assert found.version == 1 and len(found.neighbors) == 3
    assert [b.id for b in tm.list_builds("stdlib").items] == [started.id]


def test_a_second_start_is_the_same_build_and_cancel(
    client: TestClient, keys: dict[str, str]
) -> None:
    _archive(client, keys, [document(i) for i in range(4)])
    tm = tidemap(client, keys["write"])
    first = tm.start_build("stdlib")
    again = tm.start_build("stdlib")
    assert (again.id, again.existing) == (first.id, True)
    with pytest.raises(BuildTimeoutError) as late:  # no worker runs in this test
        tm.wait_for_build("stdlib", first.id, timeout=0.3, poll=0.05)
    assert isinstance(late.value, TimeoutError) and late.value.waited >= 0.3
    assert (late.value.build.id, late.value.build.state) == (first.id, "queued")

    cancelled = tm.cancel_build("stdlib", first.id)
    assert (cancelled.state, cancelled.error) == ("cancelled", "cancelled before it started")
    with pytest.raises(ConflictError):
        tm.cancel_build("stdlib", first.id)
    with pytest.raises(BuildFailedError) as failed:
        tm.wait_for_build("stdlib", first.id, poll=0.05)
    assert failed.value.build.state == "cancelled"
    kept = tm.wait_for_build("stdlib", first.id, raise_on_failure=False)
    assert kept.state == "cancelled" and kept.finished and not kept.succeeded
    with pytest.raises(NotFoundError):
        tm.get_build("stdlib", first.id + 100)
    with pytest.raises(ValueError, match="poll"):
        tm.wait_for_build("stdlib", first.id, poll=0)


def test_builds_are_listed_newest_first_across_pages(
    client: TestClient, keys: dict[str, str]
) -> None:
    _archive(client, keys, [document(i) for i in range(4)])
    tm = tidemap(client, keys["write"])
    ids = []
    for _ in range(5):
        ids.append(tm.start_build("stdlib").id)
        tm.cancel_build("stdlib", ids[-1])
    assert [b.id for b in tm.iter_builds("stdlib", page_size=2)] == ids[::-1]
    page = tm.list_builds("stdlib", limit=2)
    assert [b.id for b in page.items] == ids[::-1][:2] and page.next_cursor


def test_a_build_that_cannot_succeed_raises(
    client: TestClient, keys: dict[str, str], worker_thread: EmbeddedWorker
) -> None:
    _archive(client, keys, [document(i) for i in range(2)])  # fewer than three documents
    tm = tidemap(client, keys["write"])
    build = tm.start_build("stdlib")
    with pytest.raises(BuildFailedError) as failed:
        tm.wait_for_build("stdlib", build.id, timeout=60, poll=0.05)
    status = failed.value.build
    assert status.state == "failed" and status.error and str(build.id) in str(failed.value)
    with pytest.raises(ConflictError) as none:
        tm.index("stdlib")
    assert none.value.code == "no_index"


def test_queries_before_the_first_build_are_conflicts(
    client: TestClient, keys: dict[str, str]
) -> None:
    _archive(client, keys, [document(i) for i in range(4)])
    tm = tidemap(client, keys["write"])
    with pytest.raises(ConflictError) as no_index:
        tm.index("stdlib")
    assert (no_index.value.status, no_index.value.code) == (409, "no_index")
    assert no_index.value.details["build"] is None
    build = tm.start_build("stdlib")
    with pytest.raises(ConflictError) as queued:
        tm.index("stdlib")
    assert queued.value.details["build"] == {"id": build.id, "state": "queued"}
    for call in (
        lambda: tm.neighbors("stdlib", "doc-1"),
        lambda: tm.similar("stdlib", "harbour moorings"),
        lambda: tm.clusters("stdlib"),
        lambda: tm.map("stdlib"),
    ):
        with pytest.raises(ConflictError) as conflict:
            call()
        assert conflict.value.code == "no_index"


# --- answers that are not the service's -----------------------------------------------------


def _fake(status: int, body: bytes, content_type: str) -> TidemapClient:
    def answer(_: httpx.Request) -> httpx.Response:
        return httpx.Response(status, content=body, headers={"content-type": content_type})

    return TidemapClient(BASE, "k", http=httpx.Client(transport=httpx.MockTransport(answer)))


def test_an_error_page_that_is_not_json_still_raises() -> None:
    with pytest.raises(ServerError) as proxy:
        _fake(502, b"<html>Bad gateway</html>", "text/html").get_collection("news")
    assert (proxy.value.status, proxy.value.code) == (502, "http_502")
    assert "Bad gateway" in proxy.value.message and proxy.value.details is None
    with pytest.raises(TidemapApiError) as teapot:
        _fake(418, b"", "text/plain").get_collection("news")
    assert type(teapot.value) is TidemapApiError and teapot.value.message == "I'm a teapot"


@pytest.mark.parametrize(
    "body", [b"<html>ok</html>", b"[1, 2]", b'{"name": "news"}', b'{"items": [{"id": 1}]}']
)
def test_a_success_of_the_wrong_shape_is_reported(body: bytes) -> None:
    fake = _fake(200, body, "application/json")
    with pytest.raises(ResponseShapeError) as bad:
        fake.get_collection("news") if b"items" not in body else fake.list_collections()
    assert "/v1/collections" in str(bad.value) and bad.value.body == body.decode()
    assert isinstance(bad.value, TidemapClientError) and not isinstance(bad.value, TidemapApiError)
