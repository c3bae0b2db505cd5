"""Groups: list, one group with its members, editor names; end to end on a real build."""

from __future__ import annotations

from collections import Counter
from datetime import datetime
from typing import Any

import pytest
from sqlalchemy import Engine, func, insert, select

from service.storage.models import ClusterName, Collection
from tests.factories import TestClient, assert_error, auth, new_collection, put_document
from tests.query_fixtures import BuiltCollection, build, built_collection

C = "stdlib"
URL = f"/v1/collections/{C}/clusters"
NAMES = ClusterName.__table__


@pytest.fixture
def built(engine: Engine) -> BuiltCollection:
    return built_collection(engine, C)


def get(client: TestClient, keys: dict[str, str], url: str, **params: Any) -> Any:
    response = client.get(url, params=params, headers=auth(keys["read"]))
    assert response.status_code == 200, response.text
    return response.json()


def rename(client: TestClient, keys: dict[str, str], g: int, name: Any) -> Any:
    return client.patch(f"{URL}/{g}", json={"name": name}, headers=auth(keys["write"]))


def members(client: TestClient, keys: dict[str, str], g: int, limit: int = 500) -> list[Any]:
    """Every member of group ``g``, following next_cursor."""
    out: list[Any] = []
    cursor = None
    for _ in range(1000):
        params: dict[str, Any] = {"limit": limit} | ({"cursor": cursor} if cursor else {})
        page = get(client, keys, f"{URL}/{g}", **params)
        assert len(page["members"]) <= limit
        out.extend(page["members"])
        cursor = page["next_cursor"]
        if cursor is None:
            return out
    raise AssertionError("next_cursor never ended")


def by_id(listing: dict[str, Any]) -> dict[int, dict[str, Any]]:
    return {g["id"]: g for g in listing["clusters"]}


def month_of(value: str | None) -> str | None:
    return None if value is None else datetime.fromisoformat(value).strftime("%Y-%m")


def test_list_partitions_the_collection(
    client: TestClient, keys: dict[str, str], built: BuiltCollection
) -> None:
    listing = get(client, keys, URL)
    assert listing["collection"] == C and listing["version"] == 1
    groups = listing["clusters"]
    assert len(groups) >= 2
    assert [(-g["size"], g["id"]) for g in groups] == sorted((-g["size"], g["id"]) for g in groups)
    published = {d["id"]: d["published_at"] for d in built.documents}
    seen: list[str] = []
    for g in groups:
        assert set(g) == {
            "id",
            "name",
            "size",
            "label_terms",
            "representatives",
            "months",
            "provisional",
        }
        assert g["name"] is None and g["provisional"] == 0
        assert g["label_terms"] and all(
            set(t) == {"term", "score", "count"} for t in g["label_terms"]
        )
        ids = [m["id"] for m in members(client, keys, g["id"])]
        assert len(ids) == g["size"]
        assert {r["id"] for r in g["representatives"]} <= set(ids)
        # Months recounted from the stored documents' dates.
        recount = Counter(month_of(published[i]) for i in ids)
        assert {m["month"]: m["count"] for m in g["months"]} == recount
        assert [m["month"] for m in g["months"]] == sorted(recount)
        seen.extend(ids)
    assert len(seen) == len(set(seen)), "a document is in two groups"
    assert len(seen) + listing["ungrouped"] == len(built.documents)
    # Six modules on distinct subjects: most of a group comes from one module.
    largest = groups[0]
    modules = Counter(built.module_of[m["id"]] for m in members(client, keys, largest["id"]))
    assert modules.most_common(1)[0][1] / largest["size"] >= 0.7, modules


def test_pages_walk_every_member_once(
    client: TestClient, keys: dict[str, str], built: BuiltCollection
) -> None:
    g = get(client, keys, URL)["clusters"][0]
    whole = members(client, keys, g["id"], limit=500)
    paged = members(client, keys, g["id"], limit=7)
    assert paged == whole, "pages differ from the single page"
    assert len({m["id"] for m in paged}) == len(paged) == g["size"]
    first = get(client, keys, f"{URL}/{g['id']}", limit=7)
    assert {k: first[k] for k in g} == g and first["version"] == 1
    assert len(first["members"]) == 7 and isinstance(first["next_cursor"], str)
    stored = {d["id"]: d for d in built.documents}
    for m in whole:
        doc = stored[m["id"]]
        assert m["title"] == doc["title"] and m["provisional"] is False
        assert datetime.fromisoformat(m["published_at"]) == datetime.fromisoformat(
            doc["published_at"]
        )
    last = get(client, keys, f"{URL}/{g['id']}", limit=g["size"])
    assert last["next_cursor"] is None and len(last["members"]) == g["size"]


def test_name_follows_the_stable_id_across_a_rebuild(
    client: TestClient, keys: dict[str, str], built: BuiltCollection, engine: Engine
) -> None:
    groups = get(client, keys, URL)["clusters"]
    g, other = groups[0]["id"], groups[1]["id"]
    response = rename(client, keys, g, "  Decimal arithmetic  ")
    assert response.status_code == 200, response.text
    answer = response.json()
    assert answer["name"] == "Decimal arithmetic" and answer["id"] == g
    assert answer["version"] == 1 and answer["size"] == groups[0]["size"]
    assert rename(client, keys, g, "Arithmetic").json()["name"] == "Arithmetic"  # a change
    listing = by_id(get(client, keys, URL))
    assert listing[g]["name"] == "Arithmetic" and listing[other]["name"] is None
    assert get(client, keys, f"{URL}/{g}")["name"] == "Arithmetic"
    before = {m["id"] for m in members(client, keys, g)}
    # A name for an id the version does not have: stored, never shown.
    with engine.begin() as conn:
        coll_id = conn.execute(select(Collection.id).where(Collection.name == C)).scalar_one()
        conn.execute(
            insert(NAMES).values(
                collection_id=coll_id,
                stable_id=10_000,
                name="Gone",
                updated_at=datetime.now().astimezone(),
            )
        )

    # Change the collection a little, then rebuild: the group keeps its id and its name.
    client.delete(f"/v1/collections/{C}/documents/{sorted(before)[0]}", headers=auth(keys["write"]))
    build(engine, C)
    after = get(client, keys, URL)
    assert after["version"] == 2
    renamed = [x for x in after["clusters"] if x["name"] is not None]
    assert [x["id"] for x in renamed] == [g] and renamed[0]["name"] == "Arithmetic"
    now = {m["id"] for m in members(client, keys, g)}
    assert len(now & before) >= 0.8 * len(before), "stable id moved to another group"
    assert "Gone" not in {x["name"] for x in after["clusters"]}
    with engine.connect() as conn:
        stored = dict(
            conn.execute(
                select(NAMES.c.stable_id, NAMES.c.name).where(NAMES.c.collection_id == coll_id)
            ).all()
        )
    assert stored == {g: "Arithmetic", 10_000: "Gone"}

    # null and blank remove the name.
    assert rename(client, keys, g, None).json()["name"] is None
    assert by_id(get(client, keys, URL))[g]["name"] is None
    assert rename(client, keys, other, "Threads").json()["name"] == "Threads"
    assert rename(client, keys, other, "   ").json()["name"] is None
    with engine.connect() as conn:
        left = conn.execute(
            select(NAMES.c.stable_id).where(NAMES.c.collection_id == coll_id)
        ).scalars()
        assert sorted(left) == [10_000]


def test_a_deleted_member_disappears(
    client: TestClient, keys: dict[str, str], built: BuiltCollection
) -> None:
    g = get(client, keys, URL)["clusters"][0]
    gone = g["representatives"][0]["id"]
    response = client.delete(f"/v1/collections/{C}/documents/{gone}", headers=auth(keys["write"]))
    assert response.status_code == 204, response.text
    now = by_id(get(client, keys, URL))[g["id"]]
    assert now["size"] == g["size"] - 1
    assert gone not in {r["id"] for r in now["representatives"]}
    assert len(now["representatives"]) == len(g["representatives"]) - 1
    assert sum(m["count"] for m in now["months"]) == now["size"]
    ids = [m["id"] for m in members(client, keys, g["id"], limit=5)]
    assert gone not in ids and len(ids) == now["size"]


def test_provisional_documents_join_their_group(
    client: TestClient, keys: dict[str, str], built: BuiltCollection
) -> None:
    listing = get(client, keys, URL)
    g = listing["clusters"][1]
    source = g["representatives"][0]["id"]
    text = next(d["text"] for d in built.documents if d["id"] == source)
    doc = {
        "id": "late-copy",
        "title": "Late copy",
        "text": text,
        "published_at": "1969-12-31T23:00:00Z",
    }
    assert put_document(client, keys, C, doc).status_code == 201
    # Only stop words: no terms, so in no group.
    empty = {"id": "late-empty", "title": "Empty", "text": "the and of it is"}
    assert put_document(client, keys, C, empty).status_code == 201
    after = get(client, keys, URL)
    assert after["version"] == 1
    now = by_id(after)[g["id"]]
    assert now["size"] == g["size"] + 1 and now["provisional"] == 1
    assert {"month": "1969-12", "count": 1} in now["months"]
    assert after["ungrouped"] == listing["ungrouped"] + 1
    found = members(client, keys, g["id"], limit=4)
    assert found[-1] == {
        "id": "late-copy",
        "title": "Late copy",
        "published_at": "1969-12-31T23:00:00+00:00",
        "provisional": True,
    }
    assert [m["provisional"] for m in found].count(True) == 1
    # A changed member leaves its indexed place and comes back once, provisional.
    changed = next(m for m in found if not m["provisional"])
    moved = {"id": changed["id"], "title": "Changed", "text": text}
    assert put_document(client, keys, C, moved).status_code == 200
    everywhere = [
        m for x in get(client, keys, URL)["clusters"] for m in members(client, keys, x["id"])
    ]
    again = [m for m in everywhere if m["id"] == changed["id"]]
    assert again == [
        {"id": changed["id"], "title": "Changed", "published_at": None, "provisional": True}
    ]


def test_bad_input(
    client: TestClient, keys: dict[str, str], built: BuiltCollection, engine: Engine
) -> None:
    read, write = auth(keys["read"]), auth(keys["write"])
    assert_error(client.get("/v1/collections/nope/clusters", headers=read), 404, "not_found")
    new_collection(client, keys, "empty")
    assert_error(client.get("/v1/collections/empty/clusters", headers=read), 409, "no_index")
    assert_error(client.get("/v1/collections/empty/clusters/0", headers=read), 409, "no_index")
    assert_error(rename_in(client, "empty", 0, "x", write), 409, "no_index")
    assert_error(client.get(f"{URL}/abc", headers=read), 422, "invalid_input")
    assert_error(client.patch(f"{URL}/1.5", json={"name": "x"}, headers=write), 422)
    missing = assert_error(client.get(f"{URL}/999", headers=read), 404, "not_found")
    assert "999" in missing["message"] and URL in missing["message"]
    assert_error(rename(client, keys, 999, "x"), 404, "not_found")
    for cursor in ["junk!", "eyJhZnRlciI6IDF9", "eyJhZnRlciI6LTEsInByb3Zpc2lvbmFsIjpmYWxzZX0"]:
        # not base64 JSON; {"after": 1} without "provisional"; a negative id
        error = assert_error(
            client.get(f"{URL}/0", params={"cursor": cursor}, headers=read), 400, "bad_cursor"
        )
        assert "cursor" in error["message"]
    for limit in (0, 501, "x"):
        assert_error(client.get(f"{URL}/0", params={"limit": limit}, headers=read), 422)
    g = get(client, keys, URL)["clusters"][0]["id"]
    for body in ({"nom": "x"}, {"name": "x", "extra": 1}, [], {"name": 3}, {"name": ["x"]}):
        assert_error(client.patch(f"{URL}/{g}", json=body, headers=write), 422, "invalid_input")
    assert_error(rename(client, keys, g, "x" * 201), 422, "invalid_input")
    assert_error(rename(client, keys, g, "a\x00b"), 422, "invalid_input")
    assert_error(
        client.patch(f"{URL}/{g}", content=b"{not json", headers=write), 400, "malformed_json"
    )
    with engine.connect() as conn:
        assert conn.execute(select(func.count()).select_from(NAMES)).scalar() == 0
    longest = rename(client, keys, g, "  " + "y" * 200 + " ")
    assert longest.status_code == 200 and longest.json()["name"] == "y" * 200


def rename_in(client: TestClient, collection: str, g: int, name: Any, headers: Any) -> Any:
    return client.patch(
        f"/v1/collections/{collection}/clusters/{g}", json={"name": name}, headers=headers
    )


def test_scopes_and_collection_deletion(
    client: TestClient, keys: dict[str, str], built: BuiltCollection, engine: Engine
) -> None:
    g = get(client, keys, URL)["clusters"][0]["id"]
    assert_error(client.get(URL), 401, "unauthenticated")
    assert_error(rename_in(client, C, g, "Read only", auth(keys["read"])), 403, "forbidden")
    assert get(client, keys, f"{URL}/{g}")["name"] is None
    assert rename(client, keys, g, "Kept").status_code == 200
    response = client.delete(f"/v1/collections/{C}", headers=auth(keys["admin"]))
    assert response.status_code == 204, response.text
    with engine.connect() as conn:
        assert conn.execute(select(func.count()).select_from(NAMES)).scalar() == 0
    assert_error(client.get(URL, headers=auth(keys["read"])), 404, "not_found")


def test_the_list_sent_again_follows_names_and_deletions(
    client: TestClient, keys: dict[str, str], built: BuiltCollection
) -> None:
    first = client.get(URL, headers=auth(keys["read"]))
    again = client.get(URL, headers=auth(keys["read"]))
    assert first.status_code == again.status_code == 200
    assert first.headers["content-type"] == "application/json"
    assert again.content == first.content  # the same state answers the same bytes
    groups = first.json()["clusters"]
    g = groups[0]["id"]
    assert rename(client, keys, g, "Harbour ledgers").status_code == 200
    named = by_id(get(client, keys, URL))
    assert named[g]["name"] == "Harbour ledgers"
    assert rename(client, keys, g, None).status_code == 200
    assert by_id(get(client, keys, URL))[g]["name"] is None
    member = members(client, keys, g)[0]["id"]
    gone = client.delete(f"/v1/collections/{C}/documents/{member}", headers=auth(keys["write"]))
    assert gone.status_code in (200, 204), gone.text
    after = by_id(get(client, keys, URL))
    assert after[g]["size"] == groups[0]["size"] - 1
    listed = {r["id"] for x in after.values() for r in x["representatives"]}
    assert member not in listed
