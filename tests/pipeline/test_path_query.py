"""The path use case: the rebuilt walk is the build's, the search, hidden vertices, duplicates."""

from __future__ import annotations

from typing import Any

import numpy as np
import pytest
import scipy.sparse as sp
from sqlalchemy import Engine

from service.bench.synthetic_text import synthetic_counts
from service.geometry.knn import cosine_knn
from service.geometry.nystrom import extend
from service.geometry.path_search import cheapest_chain, walk_costs, without_vertices
from service.geometry.paths import most_probable_path, transition_matrix
from service.pipeline.live_index import Live, LiveIndex
from service.pipeline.mapping import MapParams, map_corpus
from service.pipeline.mapping_graph import graph_affinity
from service.pipeline.path_query import (
    THROUGH_HIDDEN,
    path,
    provisional_kernel,
    rebuild_affinity,
    version_walk,
    walk_graph,
)
from service.pipeline.version_cache import VersionCache
from tests.build_factories import add_collection, delete, factory, upsert
from tests.query_fixtures import build

# --- the rebuilt graph is the build's ------------------------------------------------


@pytest.fixture(scope="module")
def corpus_map() -> tuple[Any, MapParams]:
    counts, _ = synthetic_counts(500, n_terms=4000, n_topics=6, rng=3)
    params = MapParams(neighbors=10)
    return map_corpus(counts, params), params


def test_rebuilt_affinity_equals_the_builds(corpus_map: tuple[Any, MapParams]) -> None:
    cm, params = corpus_map
    # The build's own graph: its kNN step again (deterministic: same indices as stored)
    # and the kernel map_corpus applies, with float64 distances.
    knn = cosine_knn(cm.tfidf[cm.vertex_doc], params.neighbors, method=params.knn_method)
    assert np.array_equal(knn.indices, cm.knn_indices)
    built = graph_affinity(knn, unrelated=1.0)
    assert built.sigma_floor == cm.sigma_floor
    np.testing.assert_array_equal(np.asarray(built.weights.sum(axis=1)).ravel(), cm.degrees)

    rebuilt = rebuild_affinity(cm.knn_indices, cm.knn_distances, cm.sigma_floor)
    assert rebuilt.sigma_floor == cm.sigma_floor
    np.testing.assert_allclose(rebuilt.sigma, cm.sigma, rtol=1e-6)
    a, b = built.weights, rebuilt.weights
    assert np.array_equal(a.indptr, b.indptr) and np.array_equal(a.indices, b.indices)
    # float32 distances: relative error ~6e-8 in d, times d^2 / (sigma_i sigma_j) <= ~40.
    np.testing.assert_allclose(b.data, a.data, rtol=1e-5)
    assert np.abs(b.data - a.data).max() > 0  # it is the rounding, not a copy, that differs


def test_rebuilt_walk_has_the_stored_eigenvectors(corpus_map: tuple[Any, MapParams]) -> None:
    # P psi_k = lambda_k psi_k on each component, with the spectrum the build stored.
    cm, params = corpus_map
    walk = walk_graph(cm.knn_indices, cm.knn_distances, cm.sigma_floor, params.alpha)
    np.testing.assert_allclose(walk.degrees, cm.degrees, rtol=1e-5)
    for c in range(cm.eigenvalues.shape[0]):
        members = np.flatnonzero(cm.component == c)
        width = int(np.count_nonzero(cm.eigenvalues[c]))
        psi = cm.psi[members, :width]
        P = walk.P[members][:, members]
        residual = P @ psi - psi * cm.eigenvalues[c, :width][None, :]
        assert np.abs(residual).max() < 1e-5, np.abs(residual).max()


def test_stored_floor_is_used_not_recomputed(corpus_map: tuple[Any, MapParams]) -> None:
    cm, _ = corpus_map
    other = rebuild_affinity(cm.knn_indices, cm.knn_distances, cm.sigma_floor * 1000)
    assert other.sigma_floor == pytest.approx(cm.sigma_floor * 1000)
    assert other.sigma.min() >= cm.sigma_floor * 1000


# --- the search on graphs known by hand ------------------------------------------------

# 0 -> 3 directly (0.1), by 1 (0.5 x 0.4 = 0.2) or by 2 (0.4 x 0.3 = 0.12).
HAND = np.array(
    [
        [0.0, 0.5, 0.4, 0.1],
        [0.3, 0.0, 0.3, 0.4],
        [0.2, 0.5, 0.0, 0.3],
        [0.2, 0.5, 0.3, 0.0],
    ]
)


def _chain(cost: sp.csr_matrix, s: list[int], sc: list[float], t: list[int], tc: list[float]):
    return cheapest_chain(cost, np.array(s), np.array(sc), np.array(t), np.array(tc))


def test_hand_made_graph_best_chain() -> None:
    cost = walk_costs(sp.csr_matrix(HAND))
    chain = _chain(cost, [0], [0.0], [3], [0.0])
    assert chain is not None
    assert chain.nodes.tolist() == [0, 1, 3]
    assert np.exp(-chain.cost) == pytest.approx(0.2)
    # Forbidding vertex 1 leaves 0 -> 2 -> 3 with the build's probabilities (0.4, 0.3),
    # not renormalised ones (0.4 / 0.5 and 0.3 / 0.8 without the edges into 1).
    masked = without_vertices(cost, np.array([False, True, False, False]))
    chain = _chain(masked, [0], [0.0], [3], [0.0])
    assert chain is not None and chain.nodes.tolist() == [0, 2, 3]
    assert np.exp(-chain.cost) == pytest.approx(0.12)
    # And without 1 and 2, the direct step.
    masked = without_vertices(cost, np.array([False, True, True, False]))
    chain = _chain(masked, [0], [0.0], [3], [0.0])
    assert chain is not None and chain.nodes.tolist() == [0, 3]
    assert np.exp(-chain.cost) == pytest.approx(0.1)


def test_weighted_sources_and_targets() -> None:
    # An outside point x enters at 1 (p 0.1) or 2 (p 0.9); from 1 the target 3 costs
    # 0.4, from 2 it costs 0.3: 0.9 x 0.3 = 0.27 beats 0.1 x 0.4 = 0.04.
    cost = walk_costs(sp.csr_matrix(HAND))
    chain = _chain(cost, [1, 2], [-np.log(0.1), -np.log(0.9)], [3], [0.0])
    assert chain is not None and chain.nodes.tolist() == [2, 3]
    assert np.exp(-chain.cost) == pytest.approx(0.27)
    # Leaving by 3 costs 0.01, by 0 nothing: from 2, 2 -> 0 (0.2) beats 2 -> 3 (0.3 x 0.01).
    chain = _chain(cost, [2], [0.0], [3, 0], [-np.log(0.01), 0.0])
    assert chain is not None and chain.nodes.tolist() == [2, 0]
    assert np.exp(-chain.cost) == pytest.approx(0.2)
    # Unreachable target.
    two = walk_costs(sp.csr_matrix(np.array([[0, 1.0, 0], [1.0, 0, 0], [0, 0, 0]])))
    assert _chain(two, [0], [0.0], [2], [0.0]) is None


@pytest.mark.parametrize("seed", range(5))
def test_search_agrees_with_most_probable_path(seed: int) -> None:
    rng = np.random.default_rng(seed)
    n = 30
    a = rng.random((n, n)) * (rng.random((n, n)) < 0.15)
    a = np.triu(a, 1)
    P = transition_matrix(sp.csr_matrix(a + a.T), 1.0)
    cost = walk_costs(P)
    for s, t in rng.integers(0, n, size=(10, 2)).tolist():
        if s == t:
            continue
        expected = most_probable_path(P, s, t)
        chain = _chain(cost, [s], [0.0], [t], [0.0])
        if expected is None:
            assert chain is None
            continue
        assert chain is not None
        assert chain.cost == pytest.approx(-expected.log_probability, rel=1e-12)
        assert chain.nodes[0] == s and chain.nodes[-1] == t


# --- the use case on a collection built for it ------------------------------------------

# Two chains of documents (sliding windows over two vocabularies) joined by one bridge
# document: every path from one side to the other passes the bridge.
C = "chain"


def _chain_documents() -> list[dict[str, Any]]:
    docs = []
    for side in ("a", "b"):
        for i in range(10):
            terms = [f"t{side}{j:02d}x" for j in range(i, i + 4)]
            docs.append({"id": f"{side}-{i}", "text": " ".join(terms), "title": f"{side} {i}"})
    bridge = "ta10x ta11x ta12x tb00x tb01x tb02x"
    docs.append({"id": "bridge", "text": bridge, "title": "bridge"})
    # The same title too: the title is part of the text that is weighted.
    docs.append({"id": "bridge-copy", "text": bridge, "title": "bridge"})
    return docs


@pytest.fixture
def chain_live(engine: Engine) -> LiveIndex:
    make = factory(engine)
    add_collection(make, C, 0, {"min_df": 1})
    upsert(make, C, _chain_documents())
    build(engine, C)
    return LiveIndex(engine, VersionCache(make, check_seconds=0.0))


def _ids(answer: dict[str, Any]) -> list[str]:
    return [d["id"] for d in answer["documents"]]


def _check_steps(live: Live, answer: dict[str, Any]) -> None:
    """Steps chain, and each step's probability is the build's P (not renormalised)."""
    view = live.view
    walk = version_walk(view)
    ids = _ids(answer)
    steps = answer["steps"]
    assert [s["from"] for s in steps] == ids[:-1] and [s["to"] for s in steps] == ids[1:]
    for step in steps:
        a = int(view.vertex[view.row_of_external[step["from"]]])
        b = int(view.vertex[view.row_of_external[step["to"]]])
        assert step["probability"] == walk.P[a, b] > 0
    assert answer["probability"] == pytest.approx(np.prod([s["probability"] for s in steps]))


def test_path_crosses_the_bridge_shown_by_its_lowest_id(
    chain_live: LiveIndex, engine: Engine
) -> None:
    live = chain_live.get(C)
    answer = path(engine, live, "a-0", "b-9")
    assert answer["found"] is True
    ids = _ids(answer)
    assert ids[0] == "a-0" and ids[-1] == "b-9"
    # The copy has the higher internal id: the vertex shows the original.
    assert "bridge" in ids and "bridge-copy" not in ids
    _check_steps(live, answer)
    # Exact duplicates as endpoints: one vertex, one step of probability 1.
    twins = path(engine, live, "bridge", "bridge-copy")
    assert _ids(twins) == ["bridge", "bridge-copy"] and twins["probability"] == 1.0
    assert "duplicates" in twins["note"]


def test_hidden_vertices_are_never_stepped_on(chain_live: LiveIndex, engine: Engine) -> None:
    make = factory(engine)
    delete(make, C, "bridge")
    live = chain_live.get(C)
    answer = path(engine, live, "a-0", "b-9")
    # The vertex still has a visible document: the copy stands for it.
    assert answer["found"] is True and "bridge-copy" in _ids(answer)
    assert "bridge" not in _ids(answer)
    _check_steps(live, answer)
    delete(make, C, "bridge-copy")
    live = chain_live.get(C)
    answer = path(engine, live, "a-0", "b-9")
    # The only link is gone; the build's graph still has it, the query must not use it.
    assert answer["found"] is False and answer["reason"] == THROUGH_HIDDEN
    assert answer["steps"] == [] and answer["probability"] == 0.0
    # A chain avoiding a hidden document inside one side: a-4 is deleted, the path from
    # a-2 to a-6 goes around it.
    delete(make, C, "a-4")
    live = chain_live.get(C)
    answer = path(engine, live, "a-2", "a-6")
    assert answer["found"] is True and "a-4" not in _ids(answer)
    _check_steps(live, answer)


def test_provisional_endpoint_joins_by_its_kernel_row(
    chain_live: LiveIndex, engine: Engine
) -> None:
    make = factory(engine)
    upsert(make, C, [{"id": "new", "text": "tb05x tb06x tb07x", "title": "new"}])
    live = chain_live.get(C)
    doc = live.provisional[live.by_external["new"]]
    placement = doc.placement
    assert placement is not None and placement.component is not None
    walk = version_walk(live.view)
    vertices, w, k_alpha = provisional_kernel(live.view, walk, placement)
    # The recomputed kernel row is the one the placement used: it reproduces psi(x).
    dm = live.view.diffusion_map(placement.component)
    assert placement.psi is not None
    local = live.view.local[vertices]
    np.testing.assert_allclose(extend(dm, local, w), placement.psi, rtol=1e-6, atol=1e-9)

    out = path(engine, live, "new", "a-0")
    assert out["found"] is True and out["documents"][0] == {
        "id": "new",
        "title": "new",
        "provisional": True,
    }
    first = out["steps"][0]
    p_row = k_alpha / k_alpha.sum()
    j = int(live.view.vertex[live.view.row_of_external[first["to"]]])
    assert first["probability"] == pytest.approx(p_row[vertices.tolist().index(j)])
    assert first["shared_terms"] and {t["term"] for t in first["shared_terms"]} <= {
        "tb05x",
        "tb06x",
        "tb07x",
    }
    back = path(engine, live, "a-0", "new")
    assert back["found"] is True and _ids(back)[-1] == "new"
    last = back["steps"][-1]
    i = int(live.view.vertex[live.view.row_of_external[last["from"]]])
    expected = k_alpha / (walk.alpha_degrees[vertices] + k_alpha)
    assert last["probability"] == pytest.approx(expected[vertices.tolist().index(i)])
    assert 0 < last["probability"] < 1


def test_provisional_exact_copy_stands_on_its_twin(chain_live: LiveIndex, engine: Engine) -> None:
    make = factory(engine)
    # b-5's text; the title "new" is no term of the vocabulary, so the rows are equal.
    upsert(make, C, [{"id": "twin", "text": "tb05x tb06x tb07x tb08x", "title": "new"}])
    live = chain_live.get(C)
    out = path(engine, live, "twin", "a-0")
    original = path(engine, live, "b-5", "a-0")
    assert out["found"] is True and _ids(out)[0] == "twin"
    assert _ids(out)[1:] == _ids(original)[1:]
    assert out["probability"] == original["probability"]
    assert path(engine, live, "twin", "b-5")["note"].startswith("the two documents are exact")
