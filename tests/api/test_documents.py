"""Documents over HTTP: upsert, idempotency, reading, paging, deleting for real."""

from __future__ import annotations

from typing import Any

from sqlalchemy import Engine, select

from service.storage.codecs import decode_counts
from service.storage.models import Collection, Document, Term
from tests.factories import (
    TestClient,
    assert_error,
    auth,
    document,
    frequency_recount,
    new_collection,
    put_document,
)

DOCS = "/v1/collections/news/documents"


def collection_view(client: TestClient, keys: dict[str, str], name: str = "news") -> Any:
    response = client.get(f"/v1/collections/{name}", headers=auth(keys["read"]))
    assert response.status_code == 200, response.text
    return response.json()


def rows(engine: Engine, external_id: str) -> list[Any]:
    d = Document.__table__
    with engine.connect() as conn:
        return list(conn.execute(select(d).where(d.c.external_id == external_id)))


def frequencies(engine: Engine, collection: str = "news") -> dict[str, int]:
    t, c = Term.__table__, Collection.__table__
    with engine.connect() as conn:
        found = conn.execute(
            select(t.c.term, t.c.document_frequency)
            .join(c, c.c.id == t.c.collection_id)
            .where(c.c.name == collection)
        )
        return {term: df for term, df in found}


def test_put_inserts_then_updates_and_same_content_is_unchanged(
    client: TestClient, keys: dict[str, str]
) -> None:
    new_collection(client, keys, "news")
    response = put_document(client, keys, "news", document(1))
    assert (response.status_code, response.json()) == (201, {"id": "doc-1", "status": "inserted"})
    assert collection_view(client, keys)["changes"] == 1

    response = put_document(client, keys, "news", document(1))
    assert (response.status_code, response.json()["status"]) == (200, "unchanged")
    # The same instant written another way is the same content.
    same = document(1, published_at="2021-03-04T12:00:00+02:00")
    assert put_document(client, keys, "news", same).json()["status"] == "unchanged"
    assert collection_view(client, keys)["changes"] == 1

    response = put_document(client, keys, "news", document(1, metadata={"n": 2}))
    assert (response.status_code, response.json()["status"]) == (200, "updated")
    view = collection_view(client, keys)
    assert (view["changes"], view["documents"]) == (2, 1)


def test_get_returns_text_metadata_and_utc_dates(client: TestClient, keys: dict[str, str]) -> None:
    new_collection(client, keys, "news")
    cases = {
        "offset": ("2021-03-04T12:30:00+02:00", "2021-03-04T10:30:00+00:00"),
        "zulu": ("2021-03-04T10:30:00Z", "2021-03-04T10:30:00+00:00"),
        "naive": ("2021-03-04T10:30:00", "2021-03-04T10:30:00+00:00"),
        "date": ("2021-03-04", "2021-03-04T00:00:00+00:00"),
        "west": ("2021-03-03T23:30:00-11:00", "2021-03-04T10:30:00+00:00"),
    }
    meta = {"section": "coast", "tags": ["tide", "ferry"], "score": 0.5, "nested": {"a": None}}
    for ident, (sent, _) in cases.items():
        doc = {"id": ident, "title": "Tide table", "text": "Ferry at dawn.", "metadata": meta}
        assert put_document(client, keys, "news", doc | {"published_at": sent}).status_code == 201
    for ident, (_, expected) in cases.items():
        response = client.get(f"{DOCS}/{ident}", headers=auth(keys["read"]))
        assert response.status_code == 200, response.text
        body = response.json()
        assert body["published_at"] == expected, ident
        assert (body["id"], body["title"], body["text"]) == (ident, "Tide table", "Ferry at dawn.")
        assert body["metadata"] == meta
        assert (body["status"], body["n_terms"]) == ("ok", 4)  # title and text: 4 terms
    no_date = client.put(f"{DOCS}/undated", json={"text": "Ferry."}, headers=auth(keys["write"]))
    assert no_date.status_code == 201
    body = client.get(f"{DOCS}/undated", headers=auth(keys["read"])).json()
    assert (body["published_at"], body["title"], body["metadata"]) == (None, "", {})


def test_list_pages_through_everything_once_in_a_stable_order(
    client: TestClient, keys: dict[str, str]
) -> None:
    new_collection(client, keys, "news")
    for i in range(23):
        assert put_document(client, keys, "news", document(i)).status_code == 201
    first_order = [f"doc-{i}" for i in range(23)]

    def walk(limit: int) -> list[list[str]]:
        pages, cursor = [], None
        while True:
            params: dict[str, Any] = {"limit": limit} | ({"cursor": cursor} if cursor else {})
            response = client.get(DOCS, params=params, headers=auth(keys["read"]))
            assert response.status_code == 200, response.text
            body = response.json()
            assert all("text" not in item for item in body["items"])
            pages.append([item["id"] for item in body["items"]])
            cursor = body["next_cursor"]
            if cursor is None:
                return pages

    pages = walk(5)
    assert [len(p) for p in pages] == [5, 5, 5, 5, 3]
    assert [ident for page in pages for ident in page] == first_order
    assert walk(23) == [first_order]  # exactly one page, no empty page after it
    # Updating a document does not move it; changes between pages leave no gap.
    put_document(client, keys, "news", document(2, title="Changed"))
    response = client.get(DOCS, params={"limit": 10}, headers=auth(keys["read"]))
    cursor = response.json()["next_cursor"]
    client.delete(f"{DOCS}/doc-3", headers=auth(keys["write"]))  # already passed
    client.delete(f"{DOCS}/doc-15", headers=auth(keys["write"]))  # still ahead
    put_document(client, keys, "news", document(99))  # new: comes last
    rest = []
    while cursor:
        body = client.get(
            DOCS, params={"limit": 10, "cursor": cursor}, headers=auth(keys["read"])
        ).json()
        rest += [item["id"] for item in body["items"]]
        cursor = body["next_cursor"]
    assert rest == [f"doc-{i}" for i in range(10, 23) if i != 15] + ["doc-99"]


def test_empty_collection_lists_nothing(client: TestClient, keys: dict[str, str]) -> None:
    new_collection(client, keys, "news")
    response = client.get(DOCS, headers=auth(keys["read"]))
    assert response.json() == {"items": [], "next_cursor": None}


def test_delete_removes_the_row_and_its_document_frequencies(
    client: TestClient, keys: dict[str, str], engine: Engine
) -> None:
    new_collection(client, keys, "news")
    put_document(client, keys, "news", {"id": "a", "text": "Harbour ferry timetable."})
    put_document(client, keys, "news", {"id": "b", "text": "Harbour flood warning."})
    new_collection(client, keys, "other")
    put_document(client, keys, "other", {"id": "a", "text": "Harbour ferry timetable."})
    before = frequencies(engine)
    assert (before["harbour"], before["ferry"], before["flood"]) == (2, 1, 1)
    changes = collection_view(client, keys)["changes"]

    response = client.delete(f"{DOCS}/a", headers=auth(keys["write"]))
    assert (response.status_code, response.content) == (204, b"")
    # The row is gone for real in this collection, and only there.
    assert [r.collection_id for r in rows(engine, "a")] == [_collection_id(engine, "other")]
    after = frequencies(engine)
    assert (after["harbour"], after["ferry"], after["timetable"], after["flood"]) == (1, 0, 0, 1)
    assert frequencies(engine, "other")["ferry"] == 1
    table, recount = frequency_recount(engine, "news")
    assert table == recount
    assert collection_view(client, keys)["changes"] == changes + 1
    assert_error(client.get(f"{DOCS}/a", headers=auth(keys["read"])), 404, "not_found")
    assert_error(client.delete(f"{DOCS}/a", headers=auth(keys["write"])), 404, "not_found")
    listed = client.get(DOCS, headers=auth(keys["read"])).json()["items"]
    assert [item["id"] for item in listed] == ["b"]
    # Stored again, it is a new document.
    assert put_document(client, keys, "news", {"id": "a", "text": "Ferry."}).status_code == 201


def _collection_id(engine: Engine, name: str) -> int:
    c = Collection.__table__
    with engine.connect() as conn:
        return int(conn.execute(select(c.c.id).where(c.c.name == name)).scalar_one())


def test_text_without_terms_is_stored_as_no_terms(
    client: TestClient, keys: dict[str, str], engine: Engine
) -> None:
    new_collection(client, keys, "news")
    doc = {"id": "empty", "title": "The", "text": "and of the 2024 12 to a 7 -- !!"}
    assert put_document(client, keys, "news", doc).status_code == 201
    body = client.get(f"{DOCS}/empty", headers=auth(keys["read"])).json()
    assert (body["status"], body["n_terms"]) == ("no_terms", 0)
    (row,) = rows(engine, "empty")
    ids, counts = decode_counts(row.term_counts)
    assert (len(ids), len(counts), row.n_terms) == (0, 0, 0)
    view = collection_view(client, keys)
    assert (view["documents"], view["documents_without_terms"], view["terms"]) == (1, 1, 0)
    # Gaining terms later turns it into an ordinary document.
    put_document(client, keys, "news", doc | {"text": "Harbour at dawn."})
    body = client.get(f"{DOCS}/empty", headers=auth(keys["read"])).json()
    assert (body["status"], body["n_terms"]) == ("ok", 2)


def test_collection_delete_removes_its_documents_and_terms(
    client: TestClient, keys: dict[str, str], engine: Engine
) -> None:
    new_collection(client, keys, "news")
    new_collection(client, keys, "other")
    for i in range(4):
        put_document(client, keys, "news", document(i))
    put_document(client, keys, "other", document(9))
    news_id, other_id = _collection_id(engine, "news"), _collection_id(engine, "other")

    response = client.delete("/v1/collections/news", headers=auth(keys["admin"]))
    assert (response.status_code, response.content) == (204, b"")
    d, t, c = Document.__table__, Term.__table__, Collection.__table__
    with engine.connect() as conn:
        assert conn.execute(select(d.c.id).where(d.c.collection_id == news_id)).all() == []
        assert conn.execute(select(t.c.id).where(t.c.collection_id == news_id)).all() == []
        assert conn.execute(select(c.c.name)).scalars().all() == ["other"]
        assert len(conn.execute(select(d.c.id).where(d.c.collection_id == other_id)).all()) == 1
    assert_error(client.get("/v1/collections/news", headers=auth(keys["read"])), 404)
    assert_error(client.get(DOCS, headers=auth(keys["read"])), 404)
    # The name is free again and the new collection starts empty.
    view = new_collection(client, keys, "news")
    assert (view["documents"], view["terms"], view["changes"]) == (0, 0, 0)
