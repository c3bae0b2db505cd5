"""Placing a text that is not in the graph: a draft, or a document newer than the index.

The Nystrom extension of DESIGN.md, geometry item 4: the text is weighted with the
version's vocabulary and idf, its k nearest indexed documents by cosine are found, the
self-tuning kernel gives its weights with the graph's bandwidth rule (its own sigma is
the distance to its k-th neighbour, at least the graph's floor), and
``service.geometry.nystrom.extend`` turns those weights and the stored degrees into
``psi_k(x)``. Neighbours at cosine <= 0 get no weight: the graph gives no edge to pairs
at distance >= 1 either (service.pipeline.mapping_graph).
"""

from __future__ import annotations

from collections import Counter
from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp
from numpy.typing import NDArray

from service.errors import InvalidInputError
from service.geometry.kernel import bandwidth, kernel_weights
from service.geometry.nearest import top_k_largest
from service.geometry.nystrom import extend
from service.pipeline.query_view import QueryView
from service.text.sparse_products import combine_columns, row_dots
from service.text.weighting import weight_row

__all__ = ["Placement", "counts_row", "place_row", "text_row"]

# Cosine at which two unit TF-IDF rows count as the same text (float32 rows: rounding).
_SAME_TEXT = 1.0 - 1e-6


@dataclass(frozen=True, eq=False)
class Placement:
    """Where a new text lands. ``component`` is None when it lands nowhere mapped."""

    row: sp.csr_matrix  # (1, V) its TF-IDF row, unit length
    component: int | None
    psi: NDArray[np.float64] | None  # (K,) extended eigenvector values, [0] == 1
    pi_estimate: float | None  # the stationary weight it would have in the graph
    neighbor_vertices: NDArray[np.int64]  # its nearest vertices by cosine, best first
    neighbor_cosines: NDArray[np.float64]


def _row(view: QueryView, columns: list[int], counts: list[int]) -> sp.csr_matrix:
    return weight_row(np.asarray(columns, dtype=np.int64), counts, view.version.arrays["idf"])


def text_row(view: QueryView, text: str) -> sp.csr_matrix:
    """A text's TF-IDF row in the version's vocabulary (zero when it shares no term)."""
    counted: Counter[str] = view.tokenizer.count(text)
    columns, counts = [], []
    for term, count in counted.items():
        col = view.term_column.get(term)
        if col is not None:
            columns.append(col)
            counts.append(count)
    return _row(view, columns, counts)


def counts_row(
    view: QueryView, term_ids: NDArray[np.int64], counts: NDArray[np.int32]
) -> sp.csr_matrix:
    """A stored document's TF-IDF row from its term-count blob (global term ids)."""
    columns, kept = [], []
    for tid, count in zip(term_ids.tolist(), counts.tolist(), strict=True):
        col = view.global_term_column.get(tid)
        if col is not None:
            columns.append(col)
            kept.append(count)
    return _row(view, columns, kept)


def _nearest_vertices(
    view: QueryView, row: sp.csr_matrix, k: int
) -> tuple[NDArray[np.int64], NDArray[np.float64]]:
    """The ``k`` vertices of highest cosine with the row, best first (ties by vertex id),
    with those cosines in float64.

    Every vertex is scored in float32 (`combine_columns`); the chosen ones are scored
    again in float64 from their TF-IDF rows, since the kernel weights and the
    same-text test (a margin of 1e-6) use the value."""
    rough = combine_columns(view.vertex_tfidf_csc, row.indices, row.data)
    chosen = top_k_largest(rough, k)
    doc_rows = view.vertex_doc[chosen]
    exact = row_dots(view.tfidf, doc_rows, row.indices, row.data.astype(np.float64))
    order = np.lexsort((chosen, -exact))
    return chosen[order], exact[order]


def place_row(view: QueryView, row: sp.csr_matrix) -> Placement:
    """Nystrom placement of one TF-IDF row; raises InvalidInputError when it has no term."""
    if row.nnz == 0:
        raise InvalidInputError(
            "the text has no term of the index's vocabulary (after stop words), so it "
            "cannot be placed on the map",
            code="no_terms",
        )
    k = view.neighbors
    top_all, top_cos = _nearest_vertices(view, row, k)
    positive = top_cos > 0
    top = top_all[positive]
    if top.size == 0:
        raise InvalidInputError(
            "the text shares no term with any indexed document, so it has no neighbours",
            code="no_neighbors",
        )
    cos = top_cos[positive]
    d = np.clip(1.0 - cos, 0.0, None)
    # Its bandwidth counts the k nearest whatever their cosine, as the graph does (a
    # neighbour at cosine <= 0 is at distance >= 1).
    all_d = np.clip(1.0 - top_cos, 0.0, None)
    sigma_x = bandwidth(
        np.pad(all_d, (0, k - all_d.size), constant_values=1.0), k, view.sigma_floor
    )
    weights = kernel_weights(d, sigma_x, view.sigma[top])
    comps = view.component[top]
    mapped = comps >= 0
    if not mapped.any():
        return Placement(row, None, None, None, top.astype(np.int64), cos)
    # The component that holds most of its kernel weight; the extension is within one.
    totals = np.bincount(comps[mapped], weights=weights[mapped])
    c = int(np.argmax(totals))
    inside = comps == c
    dm = view.diffusion_map(c)
    if cos[0] >= _SAME_TEXT and comps[0] == c:
        # The same TF-IDF row as an indexed vertex: the build gives exact duplicates one
        # vertex, so the text gets that vertex's place (the extension would move it one
        # diffusion step away, since the graph has no self-loops).
        v = int(view.local[top[0]])
        return Placement(row, c, dm.psi[v].copy(), float(dm.pi[v]), top.astype(np.int64), cos)
    local = view.local[top[inside]]
    w = weights[inside]
    psi = extend(dm, local, w)
    return Placement(
        row=row,
        component=c,
        psi=psi,
        pi_estimate=_pi_estimate(view, c, dm.degrees[local], w),
        neighbor_vertices=top.astype(np.int64),
        neighbor_cosines=cos,
    )


def _pi_estimate(
    view: QueryView, c: int, degrees: NDArray[np.float64], weights: NDArray[np.float64]
) -> float | None:
    """pi(x) = d_alpha(x) / sum_j d_alpha(j): the weight the point would have if added to
    the graph without changing anyone else's degree (an estimate, for its bounds)."""
    total = view.alpha_degree_sum(c)
    if total is None or total <= 0:
        return None
    a = view.alpha
    q_x = float(weights.sum())
    d_alpha = float((weights * degrees**-a).sum()) * q_x**-a
    return d_alpha / total if d_alpha > 0 else None
