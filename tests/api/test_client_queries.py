"""The Python client's queries, groups and map export against a real build (standard-library
docstrings, tests/query_fixtures.py), checked against the raw HTTP answers."""

from __future__ import annotations

import csv
import io
import math
from typing import Any

import pytest
from sqlalchemy import Engine

from service.client import InvalidInputError, NotFoundError, TidemapClient
from tests.factories import TestClient, auth
from tests.query_fixtures import BuiltCollection, built_collection

C = "stdlib"
BASE = "http://testserver"


@pytest.fixture
def built(engine: Engine) -> BuiltCollection:
    return built_collection(engine, C)


@pytest.fixture
def tm(client: TestClient, keys: dict[str, str]) -> TidemapClient:
    return TidemapClient(BASE, keys["write"], http=client)


def raw(client: TestClient, keys: dict[str, str], path: str, params: Any = None) -> Any:
    response = client.get(f"/v1/collections/{C}{path}", params=params, headers=auth(keys["read"]))
    assert response.status_code == 200, response.text
    return response.json()


def test_neighbors_are_the_service_answer(
    client: TestClient, keys: dict[str, str], tm: TidemapClient, built: BuiltCollection
) -> None:
    answer = tm.neighbors(C, "decimal-3", k=6)
    expected = raw(client, keys, "/documents/decimal-3/neighbors", {"k": 6})
    assert answer.raw == expected
    assert (answer.collection, answer.version, answer.k, answer.t) == (C, 1, 6, 1.0)
    assert answer.document.id == "decimal-3" and answer.document.component == 0
    assert answer.document.title == built.documents[3]["title"]
    assert answer.search.method == "exact" and answer.note is None
    for got, want in zip(answer.neighbors, expected["neighbors"], strict=True):
        assert (got.id, got.title, got.provisional) == (want["id"], want["title"], False)
        assert (got.distance, got.bound, got.upper, got.cosine) == (
            want["distance"],
            want["bound"],
            want["upper"],
            want["cosine"],
        )
    later = tm.neighbors(C, "decimal-3", k=6, t=4.0)
    assert later.t == 4.0
    assert later.raw == raw(client, keys, "/documents/decimal-3/neighbors", {"k": 6, "t": 4.0})
    # Diffusion distances shrink as t grows (every |lambda| < 1 beyond the first).
    assert later.neighbors[0].distance < answer.neighbors[0].distance


def test_similar_places_a_draft_and_stores_nothing(
    tm: TidemapClient, built: BuiltCollection
) -> None:
    before = tm.get_collection(C).documents
    source = next(d for d in built.documents if d["id"] == "tarfile-5")
    answer = tm.similar(C, source["text"], title="a draft", k=5)
    assert (answer.version, answer.k, answer.component) == (1, 5, 0)
    assert len(answer.coords) > 0 and all(math.isfinite(x) for x in answer.coords)
    assert len(answer.neighbors) == 5
    assert "tarfile" in {built.module_of[n.id] for n in answer.neighbors}
    assert tm.similar(C, source["text"], k=2, t=3.0).t == 3.0
    assert tm.get_collection(C).documents == before
    with pytest.raises(InvalidInputError) as none:
        tm.similar(C, "zzzz qqqq xxxx")
    assert none.value.code == "no_terms"
    with pytest.raises(InvalidInputError):
        tm.similar(C, "harbour", k=0)


def test_distance_to_one_or_many(
    client: TestClient, keys: dict[str, str], tm: TidemapClient, built: BuiltCollection
) -> None:
    near = [n.id for n in tm.neighbors(C, "logging-2", k=3).neighbors]
    answer = tm.distance(C, "logging-2", [*near, "logging-2", "ipaddress-1"], t=2.0)
    params = [("from", "logging-2"), *[("to", x) for x in [*near, "logging-2", "ipaddress-1"]]]
    assert answer.raw == raw(client, keys, "/distance", [*params, ("t", 2.0)])
    assert answer.source.id == "logging-2" and answer.t == 2.0
    assert [d.to for d in answer.distances] == [*near, "logging-2", "ipaddress-1"]
    assert answer.distances[3].distance == 0.0 and not answer.distances[3].infinite
    for d in answer.distances:
        assert d.distance is not None and d.upper is not None and d.upper >= d.distance
    one = tm.distance(C, "logging-2", near[0])
    listed = tm.neighbors(C, "logging-2", k=1).neighbors[0]
    assert one.distances[0].distance == pytest.approx(listed.distance, rel=1e-9)
    with pytest.raises(NotFoundError):
        tm.distance(C, "logging-2", "nope-1")


def test_path_steps_chain_the_two_documents(
    client: TestClient, keys: dict[str, str], tm: TidemapClient, built: BuiltCollection
) -> None:
    answer = tm.path(C, "decimal-3", "logging-9")
    assert answer.raw == raw(client, keys, "/path", {"from": "decimal-3", "to": "logging-9"})
    assert answer.found and answer.reason is None
    assert (answer.source.id, answer.to.id) == ("decimal-3", "logging-9")
    ids = [d.id for d in answer.documents]
    assert ids[0] == "decimal-3" and ids[-1] == "logging-9"
    assert [s.source for s in answer.steps] == ids[:-1] and [s.to for s in answer.steps] == ids[1:]
    assert math.prod(s.probability for s in answer.steps) == pytest.approx(answer.probability)
    assert answer.log_probability == pytest.approx(math.log(answer.probability))
    assert all(0 < s.probability <= 1 and s.shared_terms for s in answer.steps)
    assert answer.steps[0].source_title == built.documents[3]["title"]


def test_groups_members_and_names(
    client: TestClient, keys: dict[str, str], tm: TidemapClient, built: BuiltCollection
) -> None:
    listing = tm.clusters(C)
    expected = raw(client, keys, "/clusters")
    assert [g.raw for g in listing.clusters] == expected["clusters"]
    assert listing.ungrouped == expected["ungrouped"]
    assert sum(g.size for g in listing.clusters) + listing.ungrouped == len(built.documents)
    sizes = [g.size for g in listing.clusters]
    assert sizes == sorted(sizes, reverse=True)
    group = listing.clusters[0]
    assert group.label_terms and group.representatives and group.name is None
    assert sum(m.count for m in group.months) == group.size

    page = tm.cluster(C, group.id, limit=7)
    assert page.cluster == group and len(page.members) == 7 and page.next_cursor
    members = list(tm.iter_cluster_members(C, group.id, page_size=7))
    whole = tm.cluster(C, group.id, limit=500)
    assert whole.next_cursor is None and members == list(whole.members)
    assert len(members) == group.size and len({m.id for m in members}) == group.size
    assert all(m.published_at is not None and not m.provisional for m in members)

    named = tm.rename_cluster(C, group.id, "  Logging and records ")
    assert (named.id, named.name) == (group.id, "Logging and records")
    assert {g.id: g.name for g in tm.clusters(C).clusters}[group.id] == "Logging and records"
    assert tm.rename_cluster(C, group.id, None).name is None
    with pytest.raises(InvalidInputError):
        tm.rename_cluster(C, group.id, "x" * 201)
    missing = max(g.id for g in listing.clusters) + 1
    with pytest.raises(NotFoundError) as gone:
        tm.cluster(C, missing)
    assert gone.value.details["group"] == missing


def test_map_json_csv_and_streamed_rows_agree(
    client: TestClient, keys: dict[str, str], tm: TidemapClient, built: BuiltCollection
) -> None:
    odd = 'A "title", with\na new line\u2028and more'
    tm.put_document(C, "decimal-zz", "Decimal context rounding precision", title=odd)
    exported = tm.map(C)
    header = raw(client, keys, "/map")
    assert len(exported.points) == len(header["points"]) == len(built.documents) + 1
    assert (exported.version, exported.dims, exported.t) == (1, 2, 1.0)
    assert exported.components == {c["component"]: c["size"] for c in header["components"]}
    assert {g.id for g in exported.groups} == {g.id for g in tm.clusters(C).clusters}
    point = {p.id: p for p in exported.points}
    assert point["decimal-zz"].provisional and point["decimal-zz"].title == odd
    assert all(p.coords is not None and len(p.coords) == 2 for p in exported.points)
    three = tm.map(C, dims=3, t=2.0)
    assert three.t == 2.0 and all(p.coords is not None and len(p.coords) == 3 for p in three.points)

    text = tm.map_csv(C)
    rows = list(csv.reader(io.StringIO(text, newline="")))
    streamed = list(tm.iter_map_csv(C))
    assert streamed == rows
    assert streamed[0] == ["id", "title", "group", "component", "provisional", "x", "y"]
    assert len(streamed) == len(exported.points) + 1
    for row, p in zip(streamed[1:], exported.points, strict=True):
        assert (row[0], row[1], row[4]) == (p.id, p.title, "true" if p.provisional else "false")
        assert row[2] == ("" if p.group is None else str(p.group))
        assert p.coords is not None
        assert [float(x) for x in row[5:]] == pytest.approx(list(p.coords), rel=1e-6)
    with pytest.raises(InvalidInputError):
        list(tm.iter_map_csv(C, dims=4))
    with pytest.raises(InvalidInputError):
        tm.map(C, dims=1)


def test_query_errors(tm: TidemapClient, built: BuiltCollection) -> None:
    with pytest.raises(NotFoundError) as unknown:
        tm.neighbors(C, "nope-1")
    assert unknown.value.status == 404
    with pytest.raises(InvalidInputError) as bad_k:
        tm.neighbors(C, "decimal-3", k=0)
    assert bad_k.value.code == "invalid_input"
    assert bad_k.value.details == [
        {"field": "query.k", "problem": "Input should be greater than or equal to 1"}
    ]
    with pytest.raises(InvalidInputError):
        tm.neighbors(C, "decimal-3", t=5000.0)
    with pytest.raises(NotFoundError):
        tm.neighbors("nowhere", "decimal-3")
