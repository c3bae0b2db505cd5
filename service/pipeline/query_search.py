"""The search structure of a component's diffusion coordinates, per version and t.

Small components, and any t other than the version's default, are searched exactly; a
large component at the default t through its HNSW index, stored with the version by the
build (read back here), or, for a version stored without one, built in a background
thread while exact search answers.
"""

from __future__ import annotations

import threading
from dataclasses import dataclass
from typing import Any

from service.geometry.coordinate_index import HnswSearch, measure_recall
from service.geometry.nearest import ExactSearch
from service.pipeline.coordinate_indexes import (
    CANDIDATE_MARGIN,
    INDEXED_MIN_VERTICES,
    stored_index,
)
from service.pipeline.query_view import QueryView, coordinate_scale

__all__ = ["BackgroundIndex", "StoredIndex", "search_structure", "warm_search"]


class BackgroundIndex:
    """An HNSW index built in a thread; ``ready`` is None until it is usable. Only for a
    version stored without its index (made before indexes were stored with versions)."""

    def __init__(self, exact: ExactSearch) -> None:
        self.ready: HnswSearch | None = None
        self.recall: float | None = None
        self.error: str | None = None
        threading.Thread(
            target=self._build, args=(exact,), name="coordinate-index", daemon=True
        ).start()

    def _build(self, exact: ExactSearch) -> None:
        try:
            # One thread: this process is serving queries meanwhile.
            index = HnswSearch(exact.points, threads=1)
            recall = measure_recall(index, exact, k=10, candidates=10 + CANDIDATE_MARGIN)
            self.recall = round(recall, 4)
            self.ready = index
        except Exception as exc:
            self.error = f"{type(exc).__name__}: {exc}"


@dataclass(frozen=True)
class StoredIndex:
    ready: HnswSearch
    recall: float


def _exact(view: QueryView, c: int, t: float) -> ExactSearch:
    return view._cached(("search", c, t), lambda: ExactSearch(view.coordinates(c, t)))  # type: ignore[no-any-return]


def _coordinate_index(view: QueryView, c: int, t: float) -> StoredIndex | BackgroundIndex:
    """The version's stored index of component ``c``, else one built in the background."""
    stored = stored_index(
        view.version.arrays, c, t, int(view.members[c].size), view.n_coordinates(c)
    )
    if stored is not None:
        return StoredIndex(stored[0], round(stored[1], 4))
    return BackgroundIndex(_exact(view, c, t))


def search_structure(
    view: QueryView, c: int, t: float
) -> tuple[ExactSearch | HnswSearch, dict[str, Any]]:
    """The search structure for component ``c`` at ``t``, and how it searches."""
    if t != view.default_t:
        lam, psi, _ = view.spectrum(c)
        m = view.n_coordinates(c)
        exact = ExactSearch(psi[:, 1 : m + 1] * coordinate_scale(lam, t, m)[None, :])
        return exact, {"method": "exact"}
    if view.members[c].size >= INDEXED_MIN_VERTICES:
        holder = view._cached(("hnsw", c, t), lambda: _coordinate_index(view, c, t))
        if holder.ready is not None:
            return holder.ready, {"method": "hnsw", "recall": holder.recall}
    return _exact(view, c, t), {"method": "exact"}


def warm_search(view: QueryView) -> None:
    """Ready the search structures of a freshly loaded version's large components (read
    their stored indexes, or start building them in the background), so the first queries
    after a publish do not wait for them. For `LiveIndex(on_load=...)`."""
    for c, members in enumerate(view.members):
        if members.size >= INDEXED_MIN_VERTICES:
            search_structure(view, c, view.default_t)
