"""Small builders shared by the tests."""

from __future__ import annotations

import json
import uuid
import warnings
from collections import Counter
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import Any

from sqlalchemy import Engine, select, text

from service.api.app import create_app
from service.config import Settings
from service.pipeline.keys import create_key
from service.storage import schema
from service.storage.codecs import decode_many
from service.storage.models import Collection, Document, Term
from service.storage.session import make_engine, make_session_factory

with warnings.catch_warnings():
    # starlette's TestClient prefers the httpx2 package and warns once, at import, when
    # it falls back to httpx; pytest turns warnings into errors, so silence that one.
    warnings.filterwarnings("ignore", message=r"Using `httpx` with `starlette.testclient`")
    from fastapi.testclient import TestClient

SCOPES = ("read", "write", "admin")
# Small limits, so the "too large" cases stay cheap.
SMALL_LIMITS = {"max_text_bytes": 2048, "max_batch_items": 5, "ndjson_chunk_size": 3}


def make_keys(engine: Engine) -> dict[str, str]:
    """One raw key per scope."""
    factory = make_session_factory(engine)
    keys = {}
    with factory() as session:
        for scope in SCOPES:
            keys[scope], _ = create_key(session, f"test-{scope}", scope)
    return keys


def make_client(engine: Engine, database_url: str, **overrides: Any) -> TestClient:
    settings = Settings(database_url=database_url, auth_cache_seconds=0, **overrides)
    return TestClient(create_app(settings, engine=engine), raise_server_exceptions=False)


def auth(key: str) -> dict[str, str]:
    return {"Authorization": f"Bearer {key}"}


def document(i: int, **fields: Any) -> dict[str, Any]:
    base = {
        "id": f"doc-{i}",
        "title": f"Report number {i}",
        "text": f"The harbour committee met on day {i} to discuss moorings and tides.",
        "metadata": {"n": i},
        "published_at": "2021-03-04T10:00:00Z",
    }
    return base | fields


def new_collection(
    client: TestClient, keys: dict[str, str], name: str, settings: dict[str, Any] | None = None
) -> dict[str, Any]:
    body: dict[str, Any] = {"name": name}
    if settings is not None:
        body["settings"] = settings
    response = client.post("/v1/collections", json=body, headers=auth(keys["admin"]))
    assert response.status_code == 201, response.text
    return dict(response.json())


def put_document(
    client: TestClient, keys: dict[str, str], collection: str, doc: dict[str, Any]
) -> Any:
    fields = {k: v for k, v in doc.items() if k != "id"}
    return client.put(
        f"/v1/collections/{collection}/documents/{doc['id']}",
        json=fields,
        headers=auth(keys["write"]),
    )


def ndjson(items: list[Any]) -> bytes:
    """Items as NDJSON, one JSON value a line."""
    return b"".join(json.dumps(item).encode() + b"\n" for item in items)


def assert_error(response: Any, status: int, code: str | None = None) -> dict[str, Any]:
    """Check the one error shape, ``{"error": {"code", "message", "details"}}``."""
    assert response.status_code == status, (response.status_code, response.text[:500])
    assert response.headers["content-type"].startswith("application/json"), response.headers
    body = response.json()
    assert set(body) == {"error"}, body
    error = body["error"]
    assert set(error) == {"code", "message", "details"}, error
    assert isinstance(error["code"], str) and error["code"], error
    assert isinstance(error["message"], str) and error["message"], error
    if code is not None:
        assert error["code"] == code, error
    return dict(error)


def db_snapshot(engine: Engine) -> dict[str, Any]:
    """Everything a write could change: collections (with settings, change counter and
    time of last change), documents (by content hash) and the term table."""
    c, d, t = Collection.__table__, Document.__table__, Term.__table__
    with engine.connect() as conn:
        collections = sorted(
            (r.name, json.dumps(r.settings, sort_keys=True), r.change_count, str(r.updated_at))
            for r in conn.execute(select(c.c.name, c.c.settings, c.c.change_count, c.c.updated_at))
        )
        documents = sorted(
            tuple(r)
            for r in conn.execute(
                select(d.c.collection_id, d.c.external_id, d.c.content_hash, d.c.n_terms)
            )
        )
        terms = sorted(
            tuple(r)
            for r in conn.execute(select(t.c.collection_id, t.c.term, t.c.document_frequency))
        )
    return {"collections": collections, "documents": documents, "terms": terms}


def frequency_recount(engine: Engine, collection: str) -> tuple[Counter[str], Counter[str]]:
    """(document frequencies in the term table, the same recounted from the stored vectors)
    for one collection; both leave out terms no stored document has."""
    c, d, t = Collection.__table__, Document.__table__, Term.__table__
    with engine.connect() as conn:
        coll_id = conn.execute(select(c.c.id).where(c.c.name == collection)).scalar_one()
        names = {
            int(tid): term
            for tid, term in conn.execute(
                select(t.c.id, t.c.term).where(t.c.collection_id == coll_id)
            )
        }
        stored = Counter(
            {
                term: df
                for term, df in conn.execute(
                    select(t.c.term, t.c.document_frequency).where(t.c.collection_id == coll_id)
                )
                if df
            }
        )
        blobs = [
            bytes(b)
            for b in conn.execute(
                select(d.c.term_counts).where(d.c.collection_id == coll_id)
            ).scalars()
        ]
    _, term_ids, counts = decode_many(blobs)
    assert (counts > 0).all(), "a stored vector holds a zero count"
    recount = Counter(names[int(i)] for i in term_ids)
    return stored, recount


def downgrade(engine: Engine, revision: str) -> None:
    """Run the migrations down to ``revision`` ("base": nothing left)."""
    schema.downgrade(engine, revision)


@contextmanager
def scratch_engine(backend: str, pg_url: str, tmp_path: Path) -> Iterator[Engine]:
    """An empty database nobody else uses (SQLite: a new file; PostgreSQL: a new schema
    first on the search path, dropped afterwards), for tests that change the schema."""
    if backend == "sqlite":
        engine = make_engine(f"sqlite:///{tmp_path / 'scratch.db'}")
        try:
            yield engine
        finally:
            engine.dispose()
        return
    schema = f"scratch_{uuid.uuid4().hex[:12]}"
    admin = make_engine(pg_url)
    with admin.begin() as conn:
        conn.execute(text(f"CREATE SCHEMA {schema}"))
    engine = make_engine(pg_url, connect_args={"options": f"-csearch_path={schema}"})
    try:
        yield engine
    finally:
        engine.dispose()
        with admin.begin() as conn:
            conn.execute(text(f"DROP SCHEMA {schema} CASCADE"))
        admin.dispose()
