"""The build routes and the index summary over HTTP (a worker with the fake geometry runs
in the test, between requests)."""

from __future__ import annotations

from sqlalchemy import Engine, select

from service.pipeline.index_summary import snapshot_ids, staleness
from service.storage import index_store
from service.storage.models import Collection
from tests.build_factories import factory, run_until_finished, worker
from tests.factories import TestClient, assert_error, auth, document, new_collection, put_document

NEWS = "/v1/collections/news"


def _news(client: TestClient, keys: dict[str, str], n: int = 5) -> None:
    new_collection(client, keys, "news")
    for i in range(n):
        text = f"{('harbour tide boats', 'council vote budget')[i % 2]} item{i}"
        assert put_document(client, keys, "news", document(i, text=text)).status_code == 201


def test_start_follow_and_read_the_index(
    client: TestClient, keys: dict[str, str], engine: Engine
) -> None:
    _news(client, keys)
    error = assert_error(client.get(f"{NEWS}/index", headers=auth(keys["read"])), 409, "no_index")
    assert "POST /v1/collections/news/builds" in error["message"]
    started = client.post(f"{NEWS}/builds", headers=auth(keys["write"]))
    assert started.status_code == 202, started.text
    body = started.json()
    assert (body["state"], body["existing"], body["trigger"]) == ("queued", False, "api")
    assert started.headers["location"] == f"{NEWS}/builds/{body['id']}"
    again = client.post(f"{NEWS}/builds", headers=auth(keys["write"]))
    assert again.status_code == 200 and again.json()["existing"] is True
    assert again.json()["id"] == body["id"]
    error = assert_error(client.get(f"{NEWS}/index", headers=auth(keys["read"])), 409, "no_index")
    assert error["details"]["build"] == {"id": body["id"], "state": "queued"}

    make = factory(engine)
    run_until_finished(worker(make), make, body["id"])
    done = client.get(f"{NEWS}/builds/{body['id']}", headers=auth(keys["read"])).json()
    assert (done["state"], done["version"], done["progress"]) == ("succeeded", 1, 1.0)
    assert done["timings"]["store"] >= 0 and done["statistics"]["documents"] == 5
    fresh = client.get(f"{NEWS}/index", headers=auth(keys["read"])).json()["staleness"]
    zero = {"added": 0, "changed": 0, "deleted": 0, "total": 0}
    assert fresh == zero | {"changes_since": 0}
    # The no-change answer is what the full count gives for the same snapshot.
    with make() as session:
        coll = session.scalars(select(Collection).where(Collection.name == "news")).one()
        version = index_store.version_row(session.connection(), int(coll.active_version_id))
        ids = snapshot_ids(session.connection(), version)
        assert staleness(session, coll.id, int(version.snapshot_change_count), ids) == zero

    put_document(client, keys, "news", document(9, text="brand new harbour story"))
    put_document(client, keys, "news", document(0, text="harbour tide rewritten"))
    client.delete(f"{NEWS}/documents/doc-1", headers=auth(keys["write"]))
    index = client.get(f"{NEWS}/index", headers=auth(keys["read"]))
    assert index.status_code == 200, index.text
    summary = index.json()
    assert (summary["version"], summary["documents"], summary["groups"]) == (1, 5, 2)
    assert summary["staleness"] == {
        "added": 1,
        "changed": 1,
        "deleted": 1,
        "total": 3,
        "changes_since": 3,
    }
    for key in ("vocabulary_size", "edges", "components", "isolated", "eigenvalues"):
        assert summary[key] is not None, key
    assert summary["coordinates"] == 2 and summary["building"] is None


def test_list_and_cancel(client: TestClient, keys: dict[str, str]) -> None:
    _news(client, keys)
    ids = []
    for _ in range(3):
        ids.append(client.post(f"{NEWS}/builds", headers=auth(keys["write"])).json()["id"])
        cancelled = client.delete(f"{NEWS}/builds/{ids[-1]}", headers=auth(keys["write"]))
        assert cancelled.status_code == 200 and cancelled.json()["state"] == "cancelled"
    assert_error(client.delete(f"{NEWS}/builds/{ids[0]}", headers=auth(keys["write"])), 409)
    page = client.get(f"{NEWS}/builds?limit=2", headers=auth(keys["read"])).json()
    assert [b["id"] for b in page["items"]] == ids[::-1][:2]
    rest = client.get(
        f"{NEWS}/builds?limit=2&cursor={page['next_cursor']}", headers=auth(keys["read"])
    ).json()
    assert [b["id"] for b in rest["items"]] == ids[:1] and rest["next_cursor"] is None
    other = new_collection(client, keys, "other")
    assert other["name"] == "other"
    assert_error(
        client.get(f"/v1/collections/other/builds/{ids[0]}", headers=auth(keys["read"])), 404
    )
