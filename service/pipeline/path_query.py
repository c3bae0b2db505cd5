"""Why two documents are related: the most probable chain of documents linking them.

GET .../path?from=&to= answers with the walk of largest probability under the diffusion
map's Markov matrix ``P = D^-1 K_alpha`` (Coifman & Lafon 2006) from one document to the
other, each step's probability and the terms each step's two documents share most.

The graph is not stored, but the version stores what rebuilds it: per vertex the k-NN
lists (``knn_indices``, ``knn_distances`` rounded to float32), and the bandwidth floor
``sigma_floor``. `rebuild_affinity` runs the build's own kernel
(`service.pipeline.mapping_graph.graph_affinity` with ``unrelated=1.0``, as `map_corpus`
calls it, and the stored floor), so the rebuilt ``W`` equals the build's up to the
float32 rounding of the distances (relative 1e-7; tests/pipeline/test_path_query.py).
``P`` and its edge costs ``-log P`` are built once per version (`walk_graph`, kept in the
view's cache) and searched by Dijkstra's algorithm (`service.geometry.path_search`).

Live changes:

- *Hidden vertices* (every document of the vertex deleted or changed since the build)
  are never stepped onto: the edges into them are removed for the query. The other
  probabilities are NOT renormalised: every step's probability is the build's walk's,
  the walk is just forbidden to use those vertices. The masked edge graph is kept for
  the last set of hidden vertices seen, so queries between two changes reuse it.
- *Provisional documents* (newer than the build, placed by the Nystrom extension) are
  an extra node of the walk for the query: the first step from a provisional source x
  goes to any of its kernel neighbours j with ``p(x, j) = K_alpha(x, j) / sum_j
  K_alpha(x, j)``, the row the extension itself uses (`service.geometry.nystrom`); the
  last step into a provisional target y comes from any of its neighbours i with
  ``p(i, y) = K_alpha(i, y) / (d_i + K_alpha(i, y))``, the probability of that step if y
  were added to i's row (``d_i`` the build's alpha-degree). The degrees ``q`` of the
  indexed documents are held at the build's, as the extension does. The search picks
  the best neighbour, not necessarily the strongest one. A provisional exact copy of
  an indexed text stands on that text's vertex instead, as its placement does.

Exact duplicates share a vertex; an intermediate vertex is shown as its visible
document of lowest internal id; an endpoint as the document asked for.
"""

from __future__ import annotations

import hashlib
import itertools
from dataclasses import dataclass
from typing import Any

import numpy as np
import scipy.sparse as sp
from numpy.typing import NDArray
from sqlalchemy import Engine

from service.geometry.kernel import AffinityGraph, bandwidth, kernel_weights
from service.geometry.knn import KnnGraph
from service.geometry.path_search import cheapest_chain, walk_costs, without_vertices
from service.geometry.paths import transition_matrix
from service.pipeline.live_index import Live
from service.pipeline.mapping_graph import graph_affinity

# An exact copy takes its twin's place with the same threshold as the placement.
from service.pipeline.placement import _SAME_TEXT, Placement
from service.pipeline.queries import QueryPoint, resolve
from service.pipeline.query_view import QueryView

__all__ = [
    "N_SHARED_TERMS",
    "WalkGraph",
    "path",
    "rebuild_affinity",
    "shared_terms",
    "walk_graph",
]

N_SHARED_TERMS = 5

_WALK_KEY = ("path", "walk")
_MASK_KEY = ("path", "masked")
_TERMS_KEY = ("path", "terms")

DIFFERENT_COMPONENTS = (
    "the documents lie in different connected components of the graph: no random walk "
    "links them, the diffusion distance is infinite"
)
THROUGH_HIDDEN = (
    "every chain linking the documents passes through documents deleted or changed since "
    "the index was built; the next build links them again if they are still related"
)


@dataclass(frozen=True, eq=False)
class WalkGraph:
    """The build's random walk on the vertex graph."""

    P: sp.csr_matrix  # (n_v, n_v) transition matrix, rows summing to 1 (0: no edge)
    cost: sp.csr_matrix  # -log P, sharing P's structure
    degrees: NDArray[np.float64]  # (n_v,) q = W 1
    alpha_degrees: NDArray[np.float64]  # (n_v,) d = K_alpha 1
    alpha: float


def rebuild_affinity(
    knn_indices: NDArray[np.integer[Any]],
    knn_distances: NDArray[np.floating[Any]],
    sigma_floor: float,
) -> AffinityGraph:
    """The build's affinity graph from its stored k-NN lists and bandwidth floor.

    `map_corpus` calls ``map_graph(knn, ..., unrelated=1.0)``, whose kernel is
    ``graph_affinity(knn, 1.0)`` with the floor computed from the float64 distances;
    the stored floor is that value, so passing it makes the bandwidths the build's up to
    the float32 rounding of the stored distances. A pair whose cosine was positive but
    below ~3e-8 would round to distance 1.0 and lose its edge here; cosines of TF-IDF
    rows sharing a term are far larger.
    """
    knn = KnnGraph(
        indices=np.asarray(knn_indices, dtype=np.int64),
        distances=np.asarray(knn_distances, dtype=np.float64),
        method="exact",
        recall=None,
        metric="cosine",
    )
    return graph_affinity(knn, unrelated=1.0, sigma_floor=float(sigma_floor))


def walk_graph(
    knn_indices: NDArray[np.integer[Any]],
    knn_distances: NDArray[np.floating[Any]],
    sigma_floor: float,
    alpha: float,
) -> WalkGraph:
    """``P`` of the alpha-normalised kernel of the rebuilt graph, its costs and degrees."""
    W = rebuild_affinity(knn_indices, knn_distances, sigma_floor).weights
    P = transition_matrix(W, alpha)
    q = np.asarray(W.sum(axis=1)).ravel()
    q_pow = np.zeros_like(q)
    q_pow[q > 0] = q[q > 0] ** -alpha
    return WalkGraph(
        P=P,
        cost=walk_costs(P),
        degrees=q,
        alpha_degrees=q_pow * (W @ q_pow),
        alpha=float(alpha),
    )


def version_walk(view: QueryView) -> WalkGraph:
    """The version's `WalkGraph`, built on first use (about 1 s at 100,000 vertices)."""
    a = view.version.arrays

    def make() -> WalkGraph:
        return walk_graph(a["knn_indices"], a["knn_distances"], view.sigma_floor, view.alpha)

    return view._cached(_WALK_KEY, make)  # type: ignore[no-any-return]


def hidden_vertices(live: Live) -> NDArray[np.bool_]:
    """Vertices none of whose documents is visible (all deleted or changed)."""
    view = live.view
    visible = np.flatnonzero(~live.hidden & (view.vertex >= 0))
    return np.bincount(view.vertex[visible], minlength=view.component.size) == 0


def _masked_cost(view: QueryView, walk: WalkGraph, hidden: NDArray[np.bool_]) -> sp.csr_matrix:
    """The edge costs without the edges into hidden vertices (one slot per version)."""
    if not hidden.any():
        return walk.cost
    key = hashlib.blake2b(np.packbits(hidden).tobytes(), digest_size=16).digest()
    with view._lock:
        slot = view._cache.get(_MASK_KEY)
    if slot is not None and slot[0] == key:
        return slot[1]  # type: ignore[no-any-return]
    masked = without_vertices(walk.cost, hidden)
    with view._lock:
        view._cache[_MASK_KEY] = (key, masked)
    return masked


@dataclass(frozen=True, eq=False)
class _End:
    """One end of the path: the vertices the walk enters or leaves it by."""

    point: QueryPoint
    vertices: NDArray[np.int64]
    probabilities: NDArray[np.float64]  # of the extra step (1 for an indexed document)
    # The document stands on vertices[0] itself (indexed, or a provisional exact copy):
    # no extra step.
    on_vertex: bool


def provisional_twin(
    view: QueryView, placement: Placement, hidden: NDArray[np.bool_]
) -> int | None:
    """The vertex a provisional text is an exact copy of, if it takes that vertex's place.

    `service.pipeline.placement.place_row` gives such a text its twin's coordinates (the
    build merges exact copies into one vertex); the path does the same, unless the twin
    is hidden (then the text joins by its kernel row, which avoids the hidden vertex).
    """
    if placement.component is None or placement.neighbor_cosines.size == 0:
        return None
    v = int(placement.neighbor_vertices[0])
    same = placement.neighbor_cosines[0] >= _SAME_TEXT
    if same and view.component[v] == placement.component and not hidden[v]:
        return v
    return None


def provisional_kernel(
    view: QueryView, walk: WalkGraph, placement: Placement
) -> tuple[NDArray[np.int64], NDArray[np.float64], NDArray[np.float64]]:
    """A placed text's neighbours j in its component, its raw kernel weights ``K(x, j)``
    and its ``K_alpha(x, j)`` to them.

    The raw weights are recomputed with `service.pipeline.placement.place_row`'s rule:
    distances ``1 - cos`` to its neighbours, its bandwidth the distance to the k-th of
    its k nearest vertices (those at cosine 0, dropped from the placement, are at
    distance 1), floored by the graph's floor.
    """
    assert placement.component is not None
    top = placement.neighbor_vertices
    d = np.clip(1.0 - placement.neighbor_cosines, 0.0, None)
    k = view.neighbors
    sigma_x = bandwidth(np.pad(d, (0, k - d.size), constant_values=1.0), k, view.sigma_floor)
    weights = kernel_weights(d, sigma_x, view.sigma[top])
    inside = view.component[top] == placement.component
    vertices, w = top[inside], weights[inside]
    a = walk.alpha
    k_alpha = w * walk.degrees[vertices] ** -a * float(w.sum()) ** -a
    return vertices.astype(np.int64), w, k_alpha


def _end(
    live: Live, walk: WalkGraph, point: QueryPoint, hidden: NDArray[np.bool_], leaving: bool
) -> _End:
    if point.vertex is not None:
        return _End(point, np.array([point.vertex], dtype=np.int64), np.ones(1), True)
    assert point.placement is not None
    twin = provisional_twin(live.view, point.placement, hidden)
    if twin is not None:
        return _End(point, np.array([twin], dtype=np.int64), np.ones(1), True)
    vertices, _, k_alpha = provisional_kernel(live.view, walk, point.placement)
    if leaving:
        probabilities = k_alpha / k_alpha.sum()
    else:
        probabilities = k_alpha / (walk.alpha_degrees[vertices] + k_alpha)
    usable = ~hidden[vertices] & (probabilities > 0)
    return _End(point, vertices[usable], probabilities[usable], False)


def _terms(view: QueryView) -> list[str]:
    def make() -> list[str]:
        terms = [""] * int(view.version.arrays["idf"].size)
        for term, column in view.term_column.items():
            terms[column] = term
        return terms

    return view._cached(_TERMS_KEY, make)  # type: ignore[no-any-return]


def shared_terms(
    a: sp.csr_matrix, b: sp.csr_matrix, terms: list[str], n: int = N_SHARED_TERMS
) -> list[dict[str, Any]]:
    """The ``n`` terms with the largest product of the two TF-IDF weights, largest first
    (ties by column); only terms both rows hold."""
    product = sp.csr_matrix(a.multiply(b))
    product.eliminate_zeros()
    columns, values = product.indices, product.data.astype(np.float64)
    order = np.lexsort((columns, -values))[:n]
    return [{"term": terms[int(columns[i])], "weight": float(values[i])} for i in order]


@dataclass(frozen=True)
class _Doc:
    ident: str
    title: str
    provisional: bool
    row: sp.csr_matrix  # its TF-IDF row


def _point_doc(live: Live, point: QueryPoint) -> _Doc:
    assert point.external_id is not None
    return _Doc(point.external_id, point.title or "", point.provisional, point.tfidf(live.view))


def _vertex_doc(live: Live, v: int) -> _Doc:
    view = live.view
    rows = live.visible_rows(view.rows_of_vertex(v))
    row = int(rows[0])  # rows ascend with internal ids; hidden vertices are never on a path
    return _Doc(view.external_ids[row], view.titles[row], False, view.tfidf[row])


def _point_out(point: QueryPoint) -> dict[str, Any]:
    return {
        "id": point.external_id,
        "title": point.title,
        "provisional": point.provisional,
        "component": point.component,
    }


def _answer(
    live: Live, x: QueryPoint, y: QueryPoint, docs: list[_Doc], steps: list[float]
) -> dict[str, Any]:
    terms = _terms(live.view)
    log_p = float(np.sum(np.log(steps))) if steps else 0.0
    return _header(live, x, y) | {
        "found": True,
        "probability": float(np.prod(steps)) if steps else 1.0,
        "log_probability": log_p,
        "steps": [
            {
                "from": a.ident,
                "to": b.ident,
                "from_title": a.title,
                "to_title": b.title,
                "probability": float(p),
                "shared_terms": shared_terms(a.row, b.row, terms),
            }
            for a, b, p in zip(docs[:-1], docs[1:], steps, strict=True)
        ],
        "documents": [
            {"id": d.ident, "title": d.title, "provisional": d.provisional} for d in docs
        ],
    }


def _header(live: Live, x: QueryPoint, y: QueryPoint) -> dict[str, Any]:
    version = live.view.version
    return {
        "collection": version.collection,
        "version": version.number,
        "from": _point_out(x),
        "to": _point_out(y),
    }


def _not_found(live: Live, x: QueryPoint, y: QueryPoint, reason: str) -> dict[str, Any]:
    return _header(live, x, y) | {
        "found": False,
        "probability": 0.0,
        "log_probability": None,
        "steps": [],
        "documents": [],
        "reason": reason,
    }


def _isolated(point: QueryPoint) -> str:
    return (
        f"document {point.external_id!r} is isolated: its connected component is too small "
        "to map, so no random walk of the map links it to other documents"
    )


def path(engine: Engine, live: Live, source: str, target: str) -> dict[str, Any]:
    """GET .../path: the most probable chain of documents from ``source`` to ``target``.

    NotFoundError for an unknown document, InvalidInputError (no_terms) for one without
    terms; an isolated document or different components give ``found: false`` with a
    reason.
    """
    x = resolve(engine, live, source)
    y = resolve(engine, live, target)
    if source == target:
        return _answer(live, x, y, [_point_doc(live, x)], [])
    for point in (x, y):
        if point.component is None:
            return _not_found(live, x, y, _isolated(point))
    if x.component != y.component:
        return _not_found(live, x, y, DIFFERENT_COMPONENTS)
    view = live.view
    walk = version_walk(view)
    hidden = hidden_vertices(live)
    start = _end(live, walk, x, hidden, leaving=True)
    end = _end(live, walk, y, hidden, leaving=False)
    if start.on_vertex and end.on_vertex and start.vertices[0] == end.vertices[0]:
        # Exact duplicates: one vertex, one text; the walker at it is at both.
        out = _answer(live, x, y, [_point_doc(live, x), _point_doc(live, y)], [1.0])
        return out | {"note": "the two documents are exact duplicates (one vertex of the graph)"}
    if start.vertices.size == 0 or end.vertices.size == 0:
        return _not_found(live, x, y, THROUGH_HIDDEN)
    chain = cheapest_chain(
        _masked_cost(view, walk, hidden),
        start.vertices,
        -np.log(start.probabilities),
        end.vertices,
        -np.log(end.probabilities),
    )
    if chain is None:
        return _not_found(live, x, y, THROUGH_HIDDEN)
    nodes = chain.nodes.tolist()
    steps = [float(walk.P[a, b]) for a, b in itertools.pairwise(nodes)]
    docs = [_vertex_doc(live, v) for v in nodes]
    if start.on_vertex:
        docs[0] = _point_doc(live, x)
    else:
        steps.insert(0, float(start.probabilities[start.vertices.tolist().index(nodes[0])]))
        docs.insert(0, _point_doc(live, x))
    if end.on_vertex:
        docs[-1] = _point_doc(live, y)
    else:
        steps.append(float(end.probabilities[end.vertices.tolist().index(nodes[-1])]))
        docs.append(_point_doc(live, y))
    return _answer(live, x, y, docs, steps)
