"""Batches commit their valid items and report each invalid one by position and reason:
a JSON list reports every item (index from 0), NDJSON only the rejected lines (from 1)."""

from __future__ import annotations

import json
from typing import Any

from sqlalchemy import Engine, select

from service.storage.models import Collection, Document
from tests.factories import (
    TestClient,
    auth,
    document,
    frequency_recount,
    ndjson,
    new_collection,
)

NDJSON = {"content-type": "application/x-ndjson"}


def stored(engine: Engine, collection: str = "news") -> dict[str, str]:
    """External id -> title of every stored document of the collection."""
    d, c = Document.__table__, Collection.__table__
    with engine.connect() as conn:
        rows = conn.execute(
            select(d.c.external_id, d.c.title)
            .join(c, c.c.id == d.c.collection_id)
            .where(c.c.name == collection)
        )
        return {ext: title for ext, title in rows}


def changes(engine: Engine, collection: str = "news") -> int:
    c = Collection.__table__
    with engine.connect() as conn:
        return int(
            conn.execute(select(c.c.change_count).where(c.c.name == collection)).scalar_one()
        )


def post(client: TestClient, keys: dict[str, str], **kwargs: Any) -> dict[str, Any]:
    headers = auth(keys["write"]) | kwargs.pop("headers", {})
    response = client.post("/v1/collections/news/documents", headers=headers, **kwargs)
    assert response.status_code == 200, response.text
    return dict(response.json())


def test_json_list_reports_every_item_and_stores_the_valid_ones(
    small_client: TestClient, keys: dict[str, str], engine: Engine
) -> None:
    new_collection(small_client, keys, "news")
    items = [
        document(0),
        {"id": "doc-1", "title": "No text"},
        {"id": "doc-2", "text": "tide " * 500},  # 2,500 bytes, over the 2,048 limit
        "not an object",
        {"id": "bad id", "text": "Spaces are not allowed in ids."},
    ]
    summary = post(small_client, keys, json=items)
    assert [item["index"] for item in summary["items"]] == [0, 1, 2, 3, 4]
    by_index = {item["index"]: item for item in summary["items"]}
    assert by_index[0] == {"index": 0, "id": "doc-0", "status": "inserted", "error": None}
    assert by_index[1]["status"] == "rejected"
    assert by_index[1]["id"] == "doc-1"
    assert by_index[1]["error"]["code"] == "invalid_input"
    assert "text" in json.dumps(by_index[1]["error"]["details"])
    assert by_index[2]["error"]["code"] == "payload_too_large"
    assert by_index[3]["error"]["code"] == "invalid_input"
    assert by_index[3]["id"] is None
    assert by_index[4]["error"]["code"] == "invalid_input"
    assert (summary["inserted"], summary["updated"], summary["unchanged"]) == (1, 0, 0)
    assert summary["rejected"] == 4
    assert stored(engine) == {"doc-0": "Report number 0"}
    assert changes(engine) == 1


def test_json_list_statuses_and_the_documents_wrapper(
    small_client: TestClient, keys: dict[str, str], engine: Engine
) -> None:
    new_collection(small_client, keys, "news")
    post(small_client, keys, json=[document(0), document(1)])
    summary = post(
        small_client,
        keys,
        json={"documents": [document(0), document(1, title="New title"), document(2)]},
    )
    statuses = [item["status"] for item in summary["items"]]
    assert statuses == ["unchanged", "updated", "inserted"]
    assert stored(engine) == {
        "doc-0": "Report number 0",
        "doc-1": "New title",
        "doc-2": "Report number 2",
    }
    assert changes(engine) == 4  # two inserts, then one update and one insert


def test_duplicate_ids_in_a_list_keep_the_last(
    small_client: TestClient, keys: dict[str, str], engine: Engine
) -> None:
    new_collection(small_client, keys, "news")
    summary = post(
        small_client, keys, json=[document(0, title="first"), document(0, title="second")]
    )
    first, second = summary["items"]
    assert first["status"] == "rejected"
    assert first["error"]["code"] == "duplicate_in_batch"
    assert second["status"] == "inserted"
    assert stored(engine) == {"doc-0": "second"}


def test_ndjson_reports_only_rejected_lines_by_line_number(
    small_client: TestClient, keys: dict[str, str], engine: Engine
) -> None:
    new_collection(small_client, keys, "news")
    overlong = json.dumps({"id": "doc-5", "text": "x" * 80_000}).encode()  # over the line limit
    lines = [
        json.dumps(document(1)).encode(),  # 1
        b'{"id": "doc-2", "text": ',  # 2: malformed JSON
        b"[1, 2, 3]",  # 3: not an object
        b"",  # 4: blank lines are skipped but counted
        overlong,  # 5
        b'{"id": "doc-6", "text": "caf\xe9"}',  # 6: not UTF-8
        json.dumps(document(7)).encode(),  # 7
        b"null",  # 8
        json.dumps({"id": "doc-9"}).encode(),  # 9: no text
        json.dumps(document(10)).encode(),  # 10, no newline at the end
    ]
    summary = post(small_client, keys, content=b"\n".join(lines), headers=NDJSON)
    rejected = {item["index"]: item for item in summary["items"]}
    assert sorted(rejected) == [2, 3, 5, 6, 8, 9]
    assert all(item["status"] == "rejected" for item in rejected.values())
    assert rejected[2]["error"]["code"] == "malformed_json"
    assert rejected[3]["error"]["code"] == "invalid_input"
    assert rejected[5]["error"]["code"] == "payload_too_large"
    assert rejected[6]["error"]["code"] == "bad_encoding"
    assert rejected[9]["id"] == "doc-9"
    assert (summary["inserted"], summary["rejected"]) == (3, 6)
    assert sorted(stored(engine)) == ["doc-1", "doc-10", "doc-7"]
    assert changes(engine) == 3


def test_ndjson_chunks_commit_independently_and_keep_frequencies_exact(
    small_client: TestClient, keys: dict[str, str], engine: Engine
) -> None:
    """ndjson_chunk_size is 3 here: ten lines are four transactions."""
    new_collection(small_client, keys, "news")
    docs = [document(i, text=f"Harbour tide report {i} with ferry number{i}") for i in range(10)]
    summary = post(small_client, keys, content=ndjson(docs), headers=NDJSON)
    assert (summary["inserted"], summary["rejected"], summary["items"]) == (10, 0, [])
    again = post(small_client, keys, content=ndjson(docs), headers=NDJSON)
    assert (again["inserted"], again["unchanged"]) == (0, 10)
    assert changes(engine) == 10
    table, recount = frequency_recount(engine, "news")
    assert table == recount
    assert table["harbour"] == 10 and table["number3"] == 1


def test_ndjson_duplicates_across_chunks_report_the_earlier_one(
    small_client: TestClient, keys: dict[str, str], engine: Engine
) -> None:
    """Lines 1 and 5 share an id and fall in different chunks (of 3 lines): the result is
    the same as within one chunk, the last occurrence kept and the earlier one reported."""
    new_collection(small_client, keys, "news")
    docs = [document(i) for i in range(4)] + [document(0, title="later")]
    summary = post(small_client, keys, content=ndjson(docs), headers=NDJSON)
    assert [(i["index"], i["error"]["code"]) for i in summary["items"]] == [
        (1, "duplicate_in_batch")
    ]
    assert (summary["inserted"], summary["updated"], summary["rejected"]) == (4, 0, 1)
    assert stored(engine)["doc-0"] == "later"
    table, recount = frequency_recount(engine, "news")
    assert table == recount


def test_empty_ndjson_stores_nothing(
    small_client: TestClient, keys: dict[str, str], engine: Engine
) -> None:
    new_collection(small_client, keys, "news")
    summary = post(small_client, keys, content=b"\n\n", headers=NDJSON)
    assert summary == {"inserted": 0, "updated": 0, "unchanged": 0, "rejected": 0, "items": []}
    assert stored(engine) == {}
