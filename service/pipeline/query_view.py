"""What the query use cases read of one index version, laid out for fast lookups.

A `QueryView` is built once per loaded version (service.pipeline.version_cache) and is
immutable: the version's arrays, plus the few things the arrays do not hold and queries
need (external ids and titles of the version's documents, the working vocabulary's term
strings). Everything per request is then an index lookup or one pass over a component.

Row = a document of the version (``doc_ids`` order, ascending internal id); vertex = a
distinct text of the graph (exact duplicates share one, see service.pipeline.mapping).
"""

from __future__ import annotations

import threading
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import scipy.sparse as sp
from numpy.typing import NDArray
from sqlalchemy import Connection, select

from service.geometry.coordinate_index import component_coordinates, coordinate_scale
from service.geometry.diffusion import DiffusionMap
from service.pipeline.collection_settings import CollectionSettings
from service.pipeline.coordinate_indexes import trimmed_eigenvalues
from service.pipeline.documents import tokenizer_for
from service.pipeline.mapping import ISOLATED, MAPPED, NO_TERMS
from service.pipeline.version_cache import LoadedVersion
from service.storage.models import Document, Term
from service.text.tokenize import Tokenizer

DOCUMENTS = Document.__table__
TERMS = Term.__table__

__all__ = [
    "ISOLATED",
    "MAPPED",
    "NO_TERMS",
    "QueryView",
    "build_query_view",
    "coordinate_scale",
]


@dataclass(frozen=True, eq=False)
class QueryView:
    version: LoadedVersion
    doc_ids: NDArray[np.int64]  # (n,) internal ids, ascending
    external_ids: list[str]  # (n,)
    titles: list[str]  # (n,)
    row_of_external: dict[str, int]
    status: NDArray[np.int8]  # (n,) MAPPED, NO_TERMS, ISOLATED
    vertex: NDArray[np.int64]  # (n,) -1 for no_terms
    vertex_rows_indptr: NDArray[np.int64]  # CSR: the rows (documents) of each vertex
    vertex_rows: NDArray[np.int64]
    component: NDArray[np.int32]  # (n_v,) -1 isolated
    local: NDArray[np.int64]  # (n_v,) position of the vertex within its component
    members: list[NDArray[np.int64]]  # vertices of each component, ascending
    tfidf: sp.csr_matrix  # (n, V) unit rows
    vertex_tfidf_csc: sp.csc_matrix  # (n_v, V): drafts' cosine to every vertex
    vertex_doc: NDArray[np.int64]  # (n_v,) the row of tfidf that vertex_tfidf_csc holds
    term_column: dict[str, int]  # working vocabulary: term -> column
    global_term_column: dict[int, int]  # global term id -> column
    tokenizer: Tokenizer
    neighbors: int  # k of the graph
    alpha: float
    default_t: float
    sigma: NDArray[np.float64]  # (n_v,)
    sigma_floor: float
    _cache: dict[Any, Any] = field(default_factory=dict, repr=False)
    _lock: threading.RLock = field(default_factory=threading.RLock, repr=False)

    # --- sizes and lookups ---------------------------------------------------------

    @property
    def n_components(self) -> int:
        return len(self.members)

    def rows_of_vertex(self, v: int) -> NDArray[np.int64]:
        return self.vertex_rows[self.vertex_rows_indptr[v] : self.vertex_rows_indptr[v + 1]]

    def n_coordinates(self, c: int) -> int:
        return int(self.version.arrays["n_coordinates"][c])

    def eigenvalues(self, c: int) -> NDArray[np.float64]:
        """The component's stored eigenvalues, trivial one first, zero padding removed."""
        return trimmed_eigenvalues(self.version.arrays["eigenvalues"][c])

    # --- per component arrays, computed once and kept -------------------------------

    def _cached(self, key: Any, make: Any) -> Any:
        value = self._cache.get(key)
        if value is None:
            with self._lock:
                value = self._cache.get(key)
                if value is None:
                    value = make()
                    self._cache[key] = value
        return value

    def spectrum(
        self, c: int
    ) -> tuple[NDArray[np.float64], NDArray[np.float64], NDArray[np.float64]]:
        """(eigenvalues (K,), psi (n_c, K), pi (n_c,)) of component ``c``."""

        def make() -> tuple[NDArray[np.float64], NDArray[np.float64], NDArray[np.float64]]:
            lam = self.eigenvalues(c)
            idx = self.members[c]
            psi = np.ascontiguousarray(self.version.arrays["psi"][idx, : lam.size])
            pi = np.asarray(self.version.arrays["pi"][idx], dtype=np.float64)
            return lam, psi, pi

        return self._cached(("spectrum", c), make)  # type: ignore[no-any-return]

    def diffusion_map(self, c: int) -> DiffusionMap:
        """Component ``c`` as the geometry layer's DiffusionMap (for the Nystrom extension)."""

        def make() -> DiffusionMap:
            lam, psi, pi = self.spectrum(c)
            idx = self.members[c]
            smallest = self.version.arrays["smallest_eigenvalue"]
            return DiffusionMap(
                eigenvalues=lam,
                psi=psi,
                pi=pi,
                degrees=np.asarray(self.version.arrays["degrees"][idx], dtype=np.float64),
                alpha_degrees=np.zeros(0),
                alpha=self.alpha,
                tau=0.0,
                solver="stored",
                residuals=np.zeros(lam.size),
                smallest_eigenvalue=float(smallest[c]) if c < smallest.size else float(lam[-1]),
                complete=lam.size == idx.size,
                seconds=0.0,
            )

        return self._cached(("dm", c), make)  # type: ignore[no-any-return]

    def coordinates(self, c: int, t: float) -> NDArray[np.float32]:
        """Diffusion coordinates ``lambda_k^t psi_k`` (k = 1..m) of component ``c``'s vertices."""

        def make() -> NDArray[np.float32]:
            lam, psi, _ = self.spectrum(c)
            return component_coordinates(psi, lam, t, self.n_coordinates(c))

        return self._cached(("coords", c, float(t)), make)  # type: ignore[no-any-return]

    def alpha_degree_sum(self, c: int) -> float | None:
        stored = self.version.arrays.get("alpha_degree_sum")
        if stored is None or c >= stored.size:
            return None
        return float(stored[c])


def _vertex_rows(
    vertex: NDArray[np.int64], n_v: int
) -> tuple[NDArray[np.int64], NDArray[np.int64]]:
    rows = np.flatnonzero(vertex >= 0)
    order = np.argsort(vertex[rows], kind="stable")
    counts = np.bincount(vertex[rows], minlength=n_v)
    indptr = np.zeros(n_v + 1, dtype=np.int64)
    np.cumsum(counts, out=indptr[1:])
    return indptr, rows[order].astype(np.int64)


def _document_names(
    conn: Connection, collection_id: int, doc_ids: NDArray[np.int64]
) -> tuple[list[str], list[str]]:
    """External ids and titles of the version's documents, in ``doc_ids`` order. A row
    deleted since the build gets empty strings (the live layer hides it anyway)."""
    found: dict[int, tuple[str, str]] = {}
    rows = conn.execution_options(yield_per=10_000).execute(
        select(DOCUMENTS.c.id, DOCUMENTS.c.external_id, DOCUMENTS.c.title).where(
            DOCUMENTS.c.collection_id == collection_id
        )
    )
    for doc_id, ext, title in rows:
        found[int(doc_id)] = (ext, title)
    external = []
    titles = []
    for doc_id in doc_ids.tolist():
        ext, title = found.get(doc_id, ("", ""))
        external.append(ext)
        titles.append(title)
    return external, titles


def _vocabulary_terms(conn: Connection, term_ids: NDArray[np.int64]) -> list[str]:
    by_id: dict[int, str] = {}
    ids = term_ids.tolist()
    for start in range(0, len(ids), 5_000):
        chunk = ids[start : start + 5_000]
        for tid, term in conn.execute(
            select(TERMS.c.id, TERMS.c.term).where(TERMS.c.id.in_(chunk))
        ):
            by_id[int(tid)] = term
    return [by_id.get(t, "") for t in ids]


def build_query_view(conn: Connection, version: LoadedVersion) -> QueryView:
    """Lay a loaded version out for queries (one pass over its documents' names)."""
    a = version.arrays
    doc_ids = np.asarray(a["doc_ids"], dtype=np.int64)
    external, titles = _document_names(conn, version.collection_id, doc_ids)
    settings = CollectionSettings.model_validate(
        {k: v for k, v in version.parameters.items() if k in CollectionSettings.model_fields}
    )
    vertex = np.asarray(a["vertex"], dtype=np.int64)
    component = np.asarray(a["component"], dtype=np.int32)
    n_v = component.size
    indptr, vrows = _vertex_rows(vertex, n_v)
    n_comp = int(np.asarray(a["n_coordinates"]).size)
    order = np.argsort(component, kind="stable")
    bounds = np.searchsorted(component[order], np.arange(n_comp + 1))
    members = [np.sort(order[bounds[c] : bounds[c + 1]]).astype(np.int64) for c in range(n_comp)]
    local = np.full(n_v, -1, dtype=np.int64)
    for idx in members:
        local[idx] = np.arange(idx.size)
    tfidf = sp.csr_matrix(
        (a["tfidf_data"], a["tfidf_indices"], a["tfidf_indptr"]),
        shape=(doc_ids.size, int(a["idf"].size)),
    )
    vertex_doc = np.asarray(a["vertex_doc"], dtype=np.int64)
    term_ids = np.asarray(a["vocabulary_term_ids"], dtype=np.int64)
    terms = _vocabulary_terms(conn, term_ids)
    conn.rollback()
    return QueryView(
        version=version,
        doc_ids=doc_ids,
        external_ids=external,
        titles=titles,
        row_of_external={e: i for i, e in enumerate(external) if e},
        status=np.asarray(a["status"], dtype=np.int8),
        vertex=vertex,
        vertex_rows_indptr=indptr,
        vertex_rows=vrows,
        component=component,
        local=local,
        members=members,
        tfidf=tfidf,
        vertex_tfidf_csc=tfidf[vertex_doc].tocsc(),
        vertex_doc=vertex_doc,
        term_column={t: i for i, t in enumerate(terms) if t},
        global_term_column={int(t): i for i, t in enumerate(term_ids.tolist())},
        tokenizer=tokenizer_for(settings.language, settings.stemming),
        neighbors=int(np.asarray(a["knn_indices"]).shape[1]),
        alpha=float(settings.alpha),
        default_t=float(settings.diffusion_time),
        sigma=np.asarray(a["sigma"], dtype=np.float64),
        sigma_floor=float(np.asarray(a["sigma_floor"]).ravel()[0]),
    )


def rows_to_vertices(view: QueryView, rows: Sequence[int]) -> NDArray[np.int64]:
    return view.vertex[np.asarray(rows, dtype=np.int64)]
