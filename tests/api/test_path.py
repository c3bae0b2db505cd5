"""GET .../path end to end on a real build: the chain linking two documents."""

from __future__ import annotations

import math
from typing import Any

import pytest
from sqlalchemy import Engine

from tests.factories import TestClient, assert_error, auth, new_collection, put_document
from tests.query_fixtures import BuiltCollection, build, built_collection

C = "stdlib"


@pytest.fixture
def built(engine: Engine) -> BuiltCollection:
    return built_collection(engine, C)


def get_path(
    client: TestClient, keys: dict[str, str], source: str, target: str, collection: str = C
) -> Any:
    return client.get(
        f"/v1/collections/{collection}/path",
        params={"from": source, "to": target},
        headers=auth(keys["read"]),
    )


def check_chain(body: dict[str, Any], source: str, target: str) -> list[str]:
    """The answer is a chain from source to target whose numbers agree; its ids."""
    assert body["found"] is True
    ids = [d["id"] for d in body["documents"]]
    assert ids[0] == source and ids[-1] == target
    assert len(set(ids)) == len(ids)  # a most probable walk never returns
    steps = body["steps"]
    assert len(steps) == len(ids) - 1
    titles = {d["id"]: d["title"] for d in body["documents"]}
    for step, a, b in zip(steps, ids[:-1], ids[1:], strict=True):
        assert step["from"] == a and step["to"] == b
        assert step["from_title"] == titles[a] and step["to_title"] == titles[b]
        assert 0 < step["probability"] <= 1
        weights = [t["weight"] for t in step["shared_terms"]]
        assert len(weights) <= 5 and all(w > 0 for w in weights)
        assert weights == sorted(weights, reverse=True)
    product = math.prod(s["probability"] for s in steps)
    assert body["probability"] == pytest.approx(product, rel=1e-12)
    assert body["log_probability"] == pytest.approx(
        sum(math.log(s["probability"]) for s in steps), rel=1e-12, abs=1e-12
    )
    return ids


def test_path_within_one_module(
    client: TestClient, keys: dict[str, str], built: BuiltCollection
) -> None:
    response = get_path(client, keys, "decimal-1", "decimal-30")
    assert response.status_code == 200, response.text
    body = response.json()
    assert body["collection"] == C and body["version"] == 1
    assert body["from"]["id"] == "decimal-1" and body["to"]["id"] == "decimal-30"
    assert body["from"]["provisional"] is False
    ids = check_chain(body, "decimal-1", "decimal-30")
    assert len(ids) >= 2
    # A chain of strongly similar documents stays within the subject.
    assert {built.module_of[i] for i in ids} == {"decimal"}
    # Each step's documents share their listed terms: the terms are words of both texts.
    # (The title is weighted with the text.)
    texts = {d["id"]: f"{d['title']} {d['text']}".lower() for d in built.documents}
    for step in body["steps"]:
        for term in step["shared_terms"]:
            assert term["term"] in texts[step["from"]] and term["term"] in texts[step["to"]]


def test_path_to_itself_and_back(
    client: TestClient, keys: dict[str, str], built: BuiltCollection
) -> None:
    body = get_path(client, keys, "logging-4", "logging-4").json()
    assert body["found"] is True and body["probability"] == 1.0 and body["steps"] == []
    assert [d["id"] for d in body["documents"]] == ["logging-4"]
    there = get_path(client, keys, "logging-4", "logging-20").json()
    back = get_path(client, keys, "logging-20", "logging-4").json()
    check_chain(there, "logging-4", "logging-20")
    check_chain(back, "logging-20", "logging-4")
    # P is not symmetric, so the two directions may differ, but both are < 1.
    assert 0 < there["probability"] < 1 and 0 < back["probability"] < 1


def test_a_deleted_document_never_appears_in_a_path(
    client: TestClient, keys: dict[str, str], built: BuiltCollection
) -> None:
    pairs = [
        ("threading-0", "threading-25"),
        ("tarfile-2", "tarfile-33"),
        ("imaplib-1", "imaplib-9"),
    ]
    inner = None
    for source, target in pairs:
        ids = check_chain(get_path(client, keys, source, target).json(), source, target)
        if len(ids) > 2:
            inner = (source, target, ids[1])
            break
    assert inner is not None, "no path with an intermediate document"
    source, target, gone = inner
    response = client.delete(f"/v1/collections/{C}/documents/{gone}", headers=auth(keys["write"]))
    assert response.status_code == 204
    body = get_path(client, keys, source, target).json()
    if body["found"]:
        assert gone not in check_chain(body, source, target)
    module = built.module_of[gone]
    others = [i for i, m in built.module_of.items() if m == module and i != gone]
    for a, b in zip(others[::7], others[3::7], strict=False):
        found = get_path(client, keys, a, b).json()
        assert gone not in [d["id"] for d in found["documents"]]
    assert_error(get_path(client, keys, gone, target), 404, "not_found")


def test_provisional_document_joins_the_path(
    client: TestClient, keys: dict[str, str], built: BuiltCollection
) -> None:
    source = next(d for d in built.documents if d["id"] == "ipaddress-4")
    new = {"id": "fresh-1", "title": "Fresh", "text": source["text"] + " network address"}
    assert put_document(client, keys, C, new).status_code == 201
    body = get_path(client, keys, "fresh-1", "ipaddress-20").json()
    ids = check_chain(body, "fresh-1", "ipaddress-20")
    assert body["from"]["provisional"] is True
    assert body["documents"][0] == {"id": "fresh-1", "title": "Fresh", "provisional": True}
    assert [d["provisional"] for d in body["documents"][1:]] == [False] * (len(ids) - 1)
    back = get_path(client, keys, "ipaddress-20", "fresh-1").json()
    check_chain(back, "ipaddress-20", "fresh-1")


def test_different_components_and_isolated_documents(
    client: TestClient, keys: dict[str, str], engine: Engine
) -> None:
    new_collection(client, keys, "two", {"min_df": 1})
    # Two chains of distinct texts over disjoint vocabularies, and a third too small to
    # be mapped (fewer vertices than min_component_size = 10).
    for topic, size in enumerate((14, 14, 4)):
        for i in range(size):
            text = " ".join(f"w{topic}{j:02d}x" for j in range(i, i + 3))
            put_document(client, keys, "two", {"id": f"t{topic}-{i}", "text": text})
    build(engine, "two")
    body = get_path(client, keys, "t0-1", "t1-1", "two").json()
    assert body["found"] is False and body["probability"] == 0 and body["steps"] == []
    assert "different connected components" in body["reason"]
    assert "infinite" in body["reason"]
    body = get_path(client, keys, "t0-1", "t2-1", "two").json()
    assert body["found"] is False and "isolated" in body["reason"] and body["steps"] == []
    assert body["to"]["component"] is None
    check_chain(get_path(client, keys, "t0-1", "t0-9", "two").json(), "t0-1", "t0-9")


def test_path_errors(client: TestClient, keys: dict[str, str], built: BuiltCollection) -> None:
    assert_error(get_path(client, keys, "no-such-doc", "decimal-1"), 404, "not_found")
    assert_error(get_path(client, keys, "decimal-1", "no-such-doc"), 404, "not_found")
    put_document(client, keys, C, {"id": "stop", "text": "the and of it was"})
    assert_error(get_path(client, keys, "stop", "decimal-1"), 422, "no_terms")
    url = f"/v1/collections/{C}/path"
    read = auth(keys["read"])
    assert_error(client.get(url, params={"from": "decimal-1"}, headers=read), 422)
    assert_error(client.get(url, params={"to": "decimal-1"}, headers=read), 422)
    assert_error(client.get(url, params={"from": "", "to": "decimal-1"}, headers=read), 422)
    assert_error(client.get(url, params={"from": "x" * 257, "to": "decimal-1"}, headers=read), 422)
    assert_error(get_path(client, keys, "a", "b", "missing"), 404, "not_found")
    assert_error(get_path(client, keys, "a", "b", "Bad Name!"), 422)
    new_collection(client, keys, "empty")
    put_document(client, keys, "empty", {"id": "a", "text": "harbour tide"})
    assert_error(get_path(client, keys, "a", "a", "empty"), 409, "no_index")
