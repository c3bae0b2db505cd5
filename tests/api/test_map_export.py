"""The whole map (GET /v1/collections/{c}/map), end to end on a real build."""

from __future__ import annotations

import csv
import io
import json
from dataclasses import replace
from typing import Any

import numpy as np
import pytest
from sqlalchemy import Engine, insert, select

from service.bench.map_export import synthetic_live
from service.pipeline.live_index import Live
from service.pipeline.map_export import csv_chunks, json_chunks, prepare_map
from service.storage.models import ClusterName, Collection, Document
from tests.factories import TestClient, assert_error, auth, new_collection, put_document
from tests.query_fixtures import BuiltCollection, built_collection

C = "stdlib"
HEADER_KEYS = {"collection", "version", "t", "dims", "components", "groups", "points"}
POINT_KEYS = {"id", "title", "group", "component", "provisional", "coords"}
NASTY_TITLE = 'Tide, "high" and low\nsecond line, with a comma\r\nthird; é ☂'


@pytest.fixture
def built(engine: Engine) -> BuiltCollection:
    return built_collection(engine, C)


def get_map(client: TestClient, keys: dict[str, str], name: str = C, **params: Any) -> Any:
    return client.get(f"/v1/collections/{name}/map", params=params, headers=auth(keys["read"]))


def live_of(client: TestClient, name: str = C) -> Live:
    live: Live = client.app.state.live_index.get(name)  # type: ignore[attr-defined]
    return live


def stored_ids_in_id_order(engine: Engine, name: str = C) -> list[str]:
    docs, colls = Document.__table__, Collection.__table__
    with engine.connect() as conn:
        return list(
            conn.execute(
                select(docs.c.external_id)
                .join(colls, colls.c.id == docs.c.collection_id)
                .where(colls.c.name == name)
                .order_by(docs.c.id)
            ).scalars()
        )


def expected_coords(live: Live, ident: str, dims: int, t: float) -> list[float] | None:
    """What the map should say, read from the view the queries use."""
    view = live.view
    row = view.row_of_external[ident]
    v = int(view.vertex[row])
    if v < 0 or view.component[v] < 0:
        return None
    c = int(view.component[v])
    lam, psi, _ = view.spectrum(c)
    m = view.n_coordinates(c)
    if t == view.default_t:
        head = view.coordinates(c, t)[view.local[v], :dims].astype(np.float64)
    else:
        head = psi[view.local[v], 1 : min(m, dims) + 1] * lam[1 : min(m, dims) + 1] ** t
    return head.tolist() + [0.0] * (dims - head.size)


def test_json_map_has_every_document_with_the_view_coordinates(
    client: TestClient, keys: dict[str, str], built: BuiltCollection, engine: Engine
) -> None:
    response = get_map(client, keys)
    assert response.status_code == 200, response.text
    assert response.headers["content-type"] == "application/json"
    body = response.json()
    assert set(body) == HEADER_KEYS
    assert (body["collection"], body["version"], body["t"], body["dims"]) == (C, 1, 1.0, 2)
    points = body["points"]
    assert [p["id"] for p in points] == stored_ids_in_id_order(engine)
    live = live_of(client)
    titles = {d["id"]: d["title"] for d in built.documents}
    for p in points:
        assert set(p) == POINT_KEYS and p["provisional"] is False
        assert p["title"] == titles[p["id"]]
        want = expected_coords(live, p["id"], 2, 1.0)
        if want is None:
            assert p["coords"] is None and p["component"] is None
            continue
        assert len(p["coords"]) == 2
        # Written with 9 significant digits: the float32 coordinates come back exactly.
        np.testing.assert_array_equal(np.float32(p["coords"]), np.float32(want))
    mapped = [p for p in points if p["coords"] is not None]
    assert len(mapped) >= 0.9 * len(points)
    sizes = {c["component"]: c["size"] for c in body["components"]}
    assert sizes == {
        c: sum(p["component"] == c for p in points) for c in range(live.view.n_components)
    }


def test_groups_carry_live_sizes_label_terms_and_names(
    client: TestClient, keys: dict[str, str], built: BuiltCollection, engine: Engine
) -> None:
    live = live_of(client)
    records = {g.stable_id: g for g in live.view.version.groups}
    named = next(iter(records))
    with engine.begin() as conn:
        conn.execute(
            insert(ClusterName.__table__).values(
                collection_id=live.view.version.collection_id, stable_id=named, name="Locks, etc."
            )
        )
    body = get_map(client, keys).json()
    groups = {g["id"]: g for g in body["groups"]}
    assert set(groups) == set(records)
    points = body["points"]
    stable = live.view.version.arrays["stable_group"]
    for gid, g in groups.items():
        assert g["size"] == sum(p["group"] == gid for p in points)
        assert g["name"] == ("Locks, etc." if gid == named else None)
        stored = sorted(records[gid].label_terms, key=lambda x: -x["score"])
        assert g["label_terms"] == [x["term"] for x in stored][:5]
        assert 3 <= len(g["label_terms"]) <= 5
    for p in points:
        row = live.view.row_of_external[p["id"]]
        assert p["group"] == (None if stable[row] < 0 else int(stable[row]))
    # Groups follow the subjects: most members of a group share one module.
    for gid in groups:
        modules = [built.module_of[p["id"]] for p in points if p["group"] == gid]
        top = max(set(modules), key=modules.count)
        assert modules.count(top) >= 0.8 * len(modules), (gid, modules)


def test_map_distances_are_a_prefix_of_the_diffusion_distance(
    client: TestClient, keys: dict[str, str], built: BuiltCollection
) -> None:
    """The map's coordinates are the first of the ones the distance endpoint sums over,
    so their Euclidean distance never exceeds the (truncated) diffusion distance and
    grows with ``dims``."""
    two = {p["id"]: p for p in get_map(client, keys, dims=2).json()["points"]}
    three = {p["id"]: p for p in get_map(client, keys, dims=3).json()["points"]}
    source, targets = "logging-2", ["logging-5", "decimal-1", "tarfile-3", "threading-7"]
    rows = client.get(
        f"/v1/collections/{C}/distance",
        params=[("from", source)] + [("to", t) for t in targets],
        headers=auth(keys["read"]),
    ).json()["distances"]
    for row in rows:
        assert row["infinite"] is False
        d2 = float(np.linalg.norm(np.subtract(two[source]["coords"], two[row["to"]]["coords"])))
        d3 = float(np.linalg.norm(np.subtract(three[source]["coords"], three[row["to"]]["coords"])))
        assert len(three[row["to"]]["coords"]) == 3
        assert three[row["to"]]["coords"][:2] == two[row["to"]]["coords"]
        assert d2 <= d3 + 1e-6 and d3 <= row["distance"] * (1 + 1e-5) + 1e-6


def test_diffusion_time_scales_each_coordinate_by_its_eigenvalue(
    client: TestClient, keys: dict[str, str], built: BuiltCollection
) -> None:
    at1 = get_map(client, keys, t=1).json()
    at3 = get_map(client, keys, t=3).json()
    assert at3["t"] == 3.0
    live = live_of(client)
    for p1, p3 in zip(at1["points"], at3["points"], strict=True):
        assert p1["id"] == p3["id"]
        if p1["coords"] is None:
            assert p3["coords"] is None
            continue
        lam = live.view.eigenvalues(p1["component"])[1:3]
        # x_k(t) = lambda_k^t psi_k: from t = 1 to t = 3 each coordinate gains lambda_k^2.
        np.testing.assert_allclose(p3["coords"], np.multiply(p1["coords"], lam**2), rtol=1e-5)
        want = expected_coords(live, p3["id"], 2, 3.0)
        np.testing.assert_allclose(p3["coords"], want, rtol=1e-6, atol=1e-9)


def _csv_rows(text: str) -> list[list[str]]:
    return list(csv.reader(io.StringIO(text, newline="")))


def test_csv_matches_the_json(
    client: TestClient, keys: dict[str, str], built: BuiltCollection
) -> None:
    as_json = get_map(client, keys, dims=3).json()
    response = get_map(client, keys, dims=3, format="csv")
    assert response.status_code == 200, response.text
    assert response.headers["content-type"] == "text/csv; charset=utf-8"
    assert response.headers["content-disposition"] == f'attachment; filename="{C}-map-v1.csv"'
    assert response.content.endswith(b"\r\n") and b"\r\n" in response.content[:60]
    header, *rows = _csv_rows(response.text)
    assert header == ["id", "title", "group", "component", "provisional", "x", "y", "z"]
    assert len(rows) == len(as_json["points"])
    for row, p in zip(rows, as_json["points"], strict=True):
        ident, title, group, component, provisional, *xyz = row
        assert (ident, title) == (p["id"], p["title"])
        assert group == ("" if p["group"] is None else str(p["group"]))
        assert component == ("" if p["component"] is None else str(p["component"]))
        assert provisional == ("true" if p["provisional"] else "false")
        if p["coords"] is None:
            assert xyz == ["", "", ""]
        else:
            assert [float(x) for x in xyz] == p["coords"]


def test_deleted_changed_and_new_documents(
    client: TestClient, keys: dict[str, str], built: BuiltCollection
) -> None:
    source = next(d for d in built.documents if d["id"] == "ipaddress-4")
    new = {"id": "fresh-1", "title": NASTY_TITLE, "text": source["text"] + " network address"}
    assert put_document(client, keys, C, new).status_code == 201
    changed = {"id": "decimal-5", "title": "now about tar", "text": source["text"]}
    assert put_document(client, keys, C, changed).status_code == 200
    stop = {"id": "stop", "title": "it was", "text": "the and of it was"}  # no terms
    assert put_document(client, keys, C, stop).status_code == 201
    gone = "imaplib-3"
    response = client.delete(f"/v1/collections/{C}/documents/{gone}", headers=auth(keys["write"]))
    assert response.status_code == 204

    body = get_map(client, keys).json()
    ids = [p["id"] for p in body["points"]]
    assert gone not in ids
    assert len(ids) == len(set(ids)) == len(built.documents) + 2 - 1  # 2 new, 1 deleted
    # Indexed rows first (internal id order), then the provisional ones.
    assert ids[-3:] == ["decimal-5", "fresh-1", "stop"]
    by_id = {p["id"]: p for p in body["points"]}
    live = live_of(client)
    for ident in ("decimal-5", "fresh-1"):
        p = by_id[ident]
        doc = live.provisional[live.by_external[ident]]
        assert p["provisional"] is True and doc.placement is not None
        assert p["component"] == doc.placement.component and p["group"] == doc.group
        extra = live.extras[p["component"]]
        want = live.extra_coordinates(p["component"], 1.0)[
            extra.docs.index(live.by_external[ident])
        ]
        np.testing.assert_allclose(p["coords"], want[:2], rtol=1e-6, atol=1e-9)
    assert by_id["fresh-1"]["title"] == NASTY_TITLE
    assert by_id["decimal-5"]["title"] == "now about tar"
    assert by_id["stop"] == {
        "id": "stop",
        "title": "it was",
        "group": None,
        "component": None,
        "provisional": True,
        "coords": None,
    }
    # The new document joins the group of the text it copies.
    assert by_id["fresh-1"]["group"] == by_id["ipaddress-4"]["group"] is not None
    sizes = {g["id"]: g["size"] for g in body["groups"]}
    assert sum(sizes.values()) == sum(p["group"] is not None for p in body["points"])

    rows = _csv_rows(get_map(client, keys, format="csv").text)[1:]
    assert [r[0] for r in rows] == ids
    fresh = rows[ids.index("fresh-1")]
    assert fresh[1] == NASTY_TITLE and fresh[4] == "true"


def test_one_answer_comes_from_one_index_state(
    client: TestClient, keys: dict[str, str], built: BuiltCollection
) -> None:
    """What is prepared before the stream starts does not move under it: a delete that
    lands while the answer is being written shows in the next answer only."""
    live = live_of(client)
    export = prepare_map(live, 2, None, "json", {})
    pieces = json_chunks(export, chunk=7)
    first = next(pieces)
    client.delete(f"/v1/collections/{C}/documents/decimal-0", headers=auth(keys["write"]))
    body = json.loads(first + b"".join(pieces))
    assert "decimal-0" in {p["id"] for p in body["points"]}
    assert "decimal-0" not in {p["id"] for p in get_map(client, keys).json()["points"]}


@pytest.mark.parametrize("chunk", [1, 3, 2_000])
def test_pieces_join_to_the_same_answer(chunk: int) -> None:
    live = synthetic_live(400, seed=2)
    export = prepare_map(live, 3, None, "json", {})
    whole = json.loads(b"".join(json_chunks(export, chunk=10_000)))
    assert json.loads(b"".join(json_chunks(export, chunk=chunk))) == whole
    assert b"".join(csv_chunks(export, chunk=chunk)) == b"".join(csv_chunks(export, chunk=10**4))
    n_pieces = sum(1 for _ in json_chunks(export, chunk=chunk))
    assert n_pieces == 2 + -(-export.n_points // chunk)
    assert len(whole["points"]) == int((~live.hidden).sum()) + len(live.provisional)


def test_a_component_with_fewer_coordinates_is_padded_with_zeros() -> None:
    live = synthetic_live(600, seed=4)
    arrays = dict(live.view.version.arrays)
    arrays["n_coordinates"] = np.array([40, 1, 0, 40, 40])
    view = replace(live.view, version=replace(live.view.version, arrays=arrays), _cache={})
    export = prepare_map(replace(live, view=view), 3, None, "json", {})
    points = json.loads(b"".join(json_chunks(export)))["points"]
    for p in points:
        if p["component"] == 1:
            assert p["coords"][0] != 0 and p["coords"][1:] == [0, 0]
        elif p["component"] == 2:
            assert p["coords"] == [0, 0, 0]
        elif p["component"] is not None:
            assert all(x != 0 for x in p["coords"])
    assert {p["component"] for p in points} >= {1, 2}


def test_map_errors(client: TestClient, keys: dict[str, str], built: BuiltCollection) -> None:
    for params in (
        {"dims": 1},
        {"dims": 4},
        {"dims": "x"},
        {"dims": 2.5},
        {"format": "xml"},
        {"format": "JSON"},
        {"t": 0},
        {"t": -1},
        {"t": 1001},
        {"t": "nan"},
    ):
        assert_error(get_map(client, keys, **params), 422, "invalid_input")
    assert_error(get_map(client, keys, "missing"), 404, "not_found")
    assert_error(get_map(client, keys, "Bad Name"), 422, "invalid_input")
    new_collection(client, keys, "empty")
    put_document(client, keys, "empty", {"id": "a", "text": "harbour tide"})
    for fmt in ("json", "csv"):
        error = assert_error(get_map(client, keys, "empty", format=fmt), 409, "no_index")
        assert "/builds" in error["message"]


def test_map_needs_a_key(client: TestClient, keys: dict[str, str], built: BuiltCollection) -> None:
    assert_error(client.get(f"/v1/collections/{C}/map"), 401, "unauthenticated")
    response = client.get(f"/v1/collections/{C}/map", headers=auth("tdm_nope"))
    assert_error(response, 401, "unauthenticated")
