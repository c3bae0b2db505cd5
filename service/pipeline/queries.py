"""Related documents and diffusion distances: the query use cases over a `Live` index.

A query point is an indexed document (a graph vertex), a provisional document or a
draft (both placed by the Nystrom extension). Related documents are the nearest in
diffusion coordinates at time t within the point's connected component (other
components are at infinite diffusion distance); each answer carries the truncated
distance, the bound on what truncation left out (DESIGN.md, geometry item 3), the
upper bound that follows, and the cosine similarity of the TF-IDF vectors.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np
import scipy.sparse as sp
from numpy.typing import NDArray
from sqlalchemy import Engine, select

from service.errors import InvalidInputError, NotFoundError
from service.geometry.distances import distances_to, distances_to_point
from service.pipeline.coordinate_indexes import CANDIDATE_MARGIN
from service.pipeline.live_index import Live
from service.pipeline.placement import Placement, place_row, text_row
from service.pipeline.query_search import search_structure
from service.pipeline.query_view import ISOLATED, NO_TERMS, QueryView, coordinate_scale
from service.storage.models import Collection, Document
from service.text.sparse_products import gather_entries, row_dots, row_entries

DOCUMENTS = Document.__table__
COLLECTIONS = Collection.__table__

MAX_T = 1000.0

__all__ = ["QueryPoint", "distance", "neighbors", "resolve", "similar"]


@dataclass(frozen=True, eq=False)
class QueryPoint:
    external_id: str | None  # None for a draft
    title: str | None
    provisional: bool
    component: int | None
    row: int | None = None  # indexed document: its row in the version
    vertex: int | None = None
    extra: int | None = None  # provisional document: index into Live.provisional
    placement: Placement | None = None  # provisional document or draft
    reason: str | None = None  # why it has no component

    def tfidf(self, view: QueryView) -> sp.csr_matrix:
        if self.placement is not None:
            return self.placement.row
        assert self.row is not None
        return view.tfidf[self.row]


def _check_t(view: QueryView, t: float | None) -> float:
    value = view.default_t if t is None else float(t)
    if not 0 < value <= MAX_T:
        raise InvalidInputError(f"t must lie in (0, {MAX_T:g}], got {value:g}", {"t": value})
    return value


def _missing(engine: Engine, live: Live, external_id: str) -> Exception:
    """404 for an unknown document; 422 for one that exists but has no terms."""
    with engine.connect() as conn:
        n_terms = conn.execute(
            select(DOCUMENTS.c.n_terms).where(
                DOCUMENTS.c.collection_id == live.view.version.collection_id,
                DOCUMENTS.c.external_id == external_id,
            )
        ).scalar()
    if n_terms is None:
        return NotFoundError(
            f"document {external_id!r} is not in collection {live.view.version.collection!r}",
            {"collection": live.view.version.collection, "id": external_id},
        )
    return InvalidInputError(
        f"document {external_id!r} has no terms (after stop words), so it is not on the map",
        {"id": external_id},
        code="no_terms",
    )


def resolve(engine: Engine, live: Live, external_id: str) -> QueryPoint:
    """The query point of a stored document; NotFoundError / InvalidInputError (no terms)."""
    view = live.view
    extra = live.by_external.get(external_id)
    if extra is not None:
        doc = live.provisional[extra]
        if doc.placement is None:
            raise InvalidInputError(
                f"document {external_id!r} has no term of the index's vocabulary; it gets a "
                "place on the map with the next build",
                {"id": external_id, "provisional": True},
                code="no_terms",
            )
        return QueryPoint(
            external_id=external_id,
            title=doc.title,
            provisional=True,
            component=doc.placement.component,
            extra=extra,
            placement=doc.placement,
            reason=None if doc.placement.component is not None else "isolated",
        )
    row = view.row_of_external.get(external_id)
    if row is None or live.hidden[row]:
        raise _missing(engine, live, external_id)
    status = int(view.status[row])
    if status == NO_TERMS:
        raise InvalidInputError(
            f"document {external_id!r} keeps no term of the working vocabulary (its terms "
            "are too rare or too common in the collection), so it is not on the map",
            {"id": external_id},
            code="no_terms",
        )
    vertex = int(view.vertex[row])
    component = int(view.component[vertex])
    return QueryPoint(
        external_id=external_id,
        title=view.titles[row],
        provisional=False,
        component=None if component < 0 else component,
        row=row,
        vertex=vertex,
        reason="isolated" if status == ISOLATED or component < 0 else None,
    )


def draft_point(live: Live, text: str, title: str | None) -> QueryPoint:
    placement = place_row(
        live.view, text_row(live.view, text if title is None else f"{title}\n{text}")
    )
    return QueryPoint(
        external_id=None,
        title=title,
        provisional=True,
        component=placement.component,
        placement=placement,
        reason=None if placement.component is not None else "isolated",
    )


def point_coordinates(live: Live, point: QueryPoint, t: float) -> NDArray[np.float64]:
    """The point's diffusion coordinates at ``t`` in its component (empty if none)."""
    if point.component is None:
        return np.zeros(0)
    view, c = live.view, point.component
    m = view.n_coordinates(c)
    if point.vertex is not None:
        _, psi, _ = view.spectrum(c)
        psi_x = psi[view.local[point.vertex]]
    else:
        assert point.placement is not None and point.placement.psi is not None
        psi_x = point.placement.psi
    return psi_x[1 : m + 1] * coordinate_scale(view.eigenvalues(c), t, m)


@dataclass(frozen=True)
class _Candidate:
    d2: float
    row: int | None  # indexed row
    extra: int | None  # provisional index


def _candidates(
    live: Live, point: QueryPoint, k: int, t: float
) -> tuple[list[_Candidate], dict[str, Any]]:
    """At least ``k`` visible documents nearest the point (approximate order by d^2)."""
    view = live.view
    c = point.component
    assert c is not None
    y = point_coordinates(live, point, t)
    search, how = search_structure(view, c, t)
    members = view.members[c]
    want = k + CANDIDATE_MARGIN
    while True:
        idx, d2 = search.search(y, want)
        rows, row_d2 = _visible_rows(live, members[idx], d2, point.row)
        if rows.size >= k or want >= search.size:
            break
        want = min(search.size, want * 4)
    extras: list[int] = []
    extra_d2 = np.zeros(0)
    extra = live.extras.get(c)
    if extra is not None:
        coords = live.extra_coordinates(c, t)
        keep = [i for i, j in enumerate(extra.docs) if j != point.extra]
        extras = [extra.docs[i] for i in keep]
        extra_d2 = ((coords[keep] - y[None, :]) ** 2).sum(axis=1)
    # Nearest first; ties by row, provisional documents (no row) before rows.
    all_d2 = np.concatenate([row_d2, extra_d2])
    tie = np.concatenate([rows, np.full(len(extras), -1, dtype=np.int64)])
    order = np.lexsort((tie, all_d2))[: max(k, 0)]
    n_rows = rows.size
    found = [
        _Candidate(float(all_d2[i]), int(rows[i]), None)
        if i < n_rows
        else _Candidate(float(all_d2[i]), None, extras[i - n_rows])
        for i in order.tolist()
    ]
    return found, how


def _visible_rows(
    live: Live, vertices: NDArray[np.int64], d2: NDArray[np.float64], exclude: int | None
) -> tuple[NDArray[np.int64], NDArray[np.float64]]:
    """The visible rows (documents) of these vertices, each with its vertex's d^2, in the
    vertices' order; ``exclude`` (the query's own row) left out."""
    view = live.view
    owner, positions = gather_entries(view.vertex_rows_indptr, vertices)
    rows = view.vertex_rows[positions]
    keep = ~live.hidden[rows]
    if exclude is not None:
        keep &= rows != exclude
    return rows[keep], d2[owner[keep]]


def _psi_of(live: Live, cand: _Candidate) -> NDArray[np.float64]:
    if cand.extra is not None:
        p = live.provisional[cand.extra].placement
        assert p is not None and p.psi is not None
        return p.psi
    view = live.view
    assert cand.row is not None
    v = int(view.vertex[cand.row])
    _, psi, _ = view.spectrum(int(view.component[v]))
    return psi[view.local[v]]


def _inv_pi(live: Live, point: QueryPoint | _Candidate) -> float:
    view = live.view
    if point.extra is not None or (isinstance(point, QueryPoint) and point.vertex is None):
        placement = (
            point.placement
            if isinstance(point, QueryPoint)
            else live.provisional[point.extra].placement  # type: ignore[index]
        )
        assert placement is not None
        pi = placement.pi_estimate
        return float("inf") if pi is None or pi <= 0 else 1.0 / pi
    row = point.row
    assert row is not None
    v = int(view.vertex[row])
    _, _, pi = view.spectrum(int(view.component[v]))
    return 1.0 / float(pi[view.local[v]])


def _measure(
    live: Live, point: QueryPoint, cands: list[_Candidate], t: float
) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    """Distances (float64) and truncation bounds from the point to the candidates."""
    view = live.view
    c = point.component
    assert c is not None
    m = view.n_coordinates(c)
    values = np.zeros(len(cands))
    bounds = np.zeros(len(cands))
    if not cands:
        return values, bounds
    indexed = [i for i, cand in enumerate(cands) if cand.row is not None]
    others = [i for i, cand in enumerate(cands) if cand.row is None]
    if point.vertex is not None and indexed:
        ys = view.local[view.vertex[[cands[i].row for i in indexed]]]
        v, b = distances_to(view.diffusion_map(c), int(view.local[point.vertex]), ys, t, m)
        values[indexed], bounds[indexed] = v, b
        rest = others
    else:
        rest = indexed + others
    if rest:
        dm = view.diffusion_map(c)
        psi_x = _psi_of_point(live, point)
        psi_ys = np.vstack([_psi_of(live, cands[i]) for i in rest])
        inv_ys = np.array([_inv_pi(live, cands[i]) for i in rest])
        v, b = distances_to_point(
            dm.eigenvalues,
            psi_x,
            psi_ys,
            _inv_pi(live, point),
            inv_ys,
            t,
            m,
            dm.smallest_eigenvalue,
        )
        values[rest], bounds[rest] = v, b
    return values, bounds


def _psi_of_point(live: Live, point: QueryPoint) -> NDArray[np.float64]:
    if point.placement is not None:
        assert point.placement.psi is not None
        return point.placement.psi
    assert point.vertex is not None and point.component is not None
    _, psi, _ = live.view.spectrum(point.component)
    return psi[live.view.local[point.vertex]]


def _cosines(live: Live, point: QueryPoint, cands: list[_Candidate]) -> NDArray[np.float64]:
    view = live.view
    if point.placement is not None:
        x_cols, x_vals = point.placement.row.indices, point.placement.row.data
    else:
        assert point.row is not None
        x_cols, x_vals = row_entries(view.tfidf, point.row)
    out = np.zeros(len(cands))
    rows = [i for i, cand in enumerate(cands) if cand.row is not None]
    if rows:
        out[rows] = row_dots(view.tfidf, [cands[i].row for i in rows], x_cols, x_vals)
    for i, cand in enumerate(cands):
        if cand.extra is not None:
            p = live.provisional[cand.extra].placement
            assert p is not None
            out[i] = float(row_dots(p.row, [0], x_cols, x_vals)[0])
    return np.clip(out, -1.0, 1.0)


def _describe(live: Live, cand: _Candidate) -> tuple[str, str, bool]:
    if cand.extra is not None:
        doc = live.provisional[cand.extra]
        return doc.external_id, doc.title, True
    assert cand.row is not None
    return live.view.external_ids[cand.row], live.view.titles[cand.row], False


def _finite(value: float) -> float | None:
    return float(value) if np.isfinite(value) else None


def related(
    live: Live, point: QueryPoint, k: int, t: float
) -> tuple[list[dict[str, Any]], dict[str, Any]]:
    """The ``k`` documents nearest the point in diffusion space, nearest first, and how
    they were searched (``{"method": "exact"}`` or ``"hnsw"`` with its measured recall)."""
    if point.component is None:
        return [], {"method": "none"}
    cands, how = _candidates(live, point, k, t)
    values, bounds = _measure(live, point, cands, t)
    cosines = _cosines(live, point, cands)
    order = np.lexsort((np.arange(len(cands)), values))
    # Whole columns at once, then plain Python values (numpy scalars cost per call).
    upper = np.sqrt(values**2 + bounds)
    columns = zip(
        order.tolist(),
        values[order].tolist(),
        _finite_list(bounds[order]),
        _finite_list(upper[order]),
        np.round(cosines[order], 6).tolist(),
        strict=True,
    )
    out = []
    for i, distance, bound, up, cosine in columns:
        ident, title, provisional = _describe(live, cands[i])
        out.append(
            {
                "id": ident,
                "title": title,
                "distance": distance,
                "bound": bound,
                "upper": up,
                "cosine": cosine,
                "provisional": provisional,
            }
        )
    return out, how


def _finite_list(values: NDArray[np.float64]) -> list[float | None]:
    return [
        v if f else None for v, f in zip(values.tolist(), np.isfinite(values).tolist(), strict=True)
    ]


def _header(live: Live, t: float) -> dict[str, Any]:
    version = live.view.version
    return {"collection": version.collection, "version": version.number, "t": t}


def _point_out(point: QueryPoint) -> dict[str, Any]:
    return {
        "id": point.external_id,
        "title": point.title,
        "provisional": point.provisional,
        "component": point.component,
    }


def neighbors(
    engine: Engine, live: Live, external_id: str, k: int, t: float | None
) -> dict[str, Any]:
    """GET .../documents/{id}/neighbors."""
    t_value = _check_t(live.view, t)
    point = resolve(engine, live, external_id)
    out = _header(live, t_value) | {"k": k, "document": _point_out(point)}
    out["neighbors"], out["search"] = related(live, point, k, t_value)
    if point.component is None:
        out["note"] = "the document is isolated (its component is too small to map)"
    return out


def similar(live: Live, text: str, title: str | None, k: int, t: float | None) -> dict[str, Any]:
    """POST .../similar: related documents of a draft placed by the Nystrom extension."""
    t_value = _check_t(live.view, t)
    point = draft_point(live, text, title)
    coords = point_coordinates(live, point, t_value)
    found, how = related(live, point, k, t_value)
    out = _header(live, t_value) | {
        "k": k,
        "component": point.component,
        "coords": [float(v) for v in coords],
        "neighbors": found,
        "search": how,
    }
    if point.component is None:
        out["note"] = "the draft's nearest documents are isolated: it lands on no mapped component"
    return out


def distance(
    engine: Engine, live: Live, source: str, targets: list[str], t: float | None
) -> dict[str, Any]:
    """GET .../distance: the diffusion distance from one document to one or more."""
    t_value = _check_t(live.view, t)
    x = resolve(engine, live, source)
    rows = []
    for target in targets:
        y = resolve(engine, live, target)
        entry: dict[str, Any] = {"to": target, "provisional": y.provisional}
        if x.component is None or y.component is None or x.component != y.component:
            entry |= {
                "distance": None,
                "bound": None,
                "upper": None,
                "infinite": True,
                "reason": "the documents lie in different connected components of the graph "
                "(or one is isolated): no random walk links them, the diffusion distance "
                "is infinite",
            }
        else:
            cand = _Candidate(0.0, y.row, y.extra)
            if y.external_id == x.external_id:
                value, bound = np.zeros(1), np.zeros(1)
            else:
                value, bound = _measure(live, x, [cand], t_value)
            entry |= {
                "distance": float(value[0]),
                "bound": _finite(bound[0]),
                "upper": _finite(np.sqrt(value[0] ** 2 + bound[0])),
                "infinite": False,
            }
        rows.append(entry)
    return _header(live, t_value) | {"from": _point_out(x), "distances": rows}
