"""The stored arrays of a real build are consistent with the Nystrom placement."""

from __future__ import annotations

import numpy as np
from sqlalchemy import Engine

from service.geometry.kernel import kernel_weights
from service.geometry.nystrom import extend
from service.pipeline.live_index import LiveIndex
from service.pipeline.placement import place_row
from service.pipeline.version_cache import VersionCache
from service.storage.session import make_session_factory
from tests.query_fixtures import built_collection


def _live(engine: Engine):  # type: ignore[no-untyped-def]
    built_collection(engine, "p")
    cache = VersionCache(make_session_factory(engine), check_seconds=0)
    return LiveIndex(engine, cache).get("p")


def test_extending_a_vertex_graph_row_reproduces_its_stored_coordinates(engine: Engine) -> None:
    view = _live(engine).view
    a = view.version.arrays
    c = 0
    dm = view.diffusion_map(c)
    members = view.members[c]
    worst = 0.0
    for v in members[:: max(1, members.size // 25)].tolist():
        idx = a["knn_indices"][v].astype(np.int64)
        dist = a["knn_distances"][v].astype(np.float64)
        keep = (dist < 1.0) & (view.component[idx] == c)
        w = kernel_weights(dist[keep], float(view.sigma[v]), view.sigma[idx[keep]])
        # The graph is the symmetrised k-NN graph, so a vertex's row also holds the
        # vertices that chose it; add those edges (same weights by symmetry of the formula).
        chose = np.flatnonzero((a["knn_indices"][members] == v).any(axis=1))
        others = members[chose]
        extra = np.setdiff1d(others, idx[keep])
        d_extra = np.array(
            [a["knn_distances"][o][a["knn_indices"][o] == v][0] for o in extra], dtype=np.float64
        )
        ok = d_extra < 1.0
        w_extra = kernel_weights(d_extra[ok], float(view.sigma[v]), view.sigma[extra[ok]])
        nodes = np.concatenate([idx[keep], extra[ok]])
        weights = np.concatenate([w, w_extra])
        psi = extend(dm, view.local[nodes], weights)
        stored = dm.psi[view.local[v]]
        m = view.n_coordinates(c) + 1
        err = np.abs(psi[:m] - stored[:m]).max() / np.abs(stored[:m]).max()
        worst = max(worst, float(err))
    # float32 neighbour distances are stored, so agreement is to float32 rounding, not 1e-8.
    assert worst < 1e-4, worst


def test_placing_a_stored_documents_row_finds_it_first(engine: Engine) -> None:
    view = _live(engine).view
    for row in (0, 40, 100):
        placement = place_row(view, view.tfidf[row])
        assert int(view.vertex[row]) == int(placement.neighbor_vertices[0])
        assert placement.neighbor_cosines[0] > 0.999
        assert placement.component == int(view.component[view.vertex[row]])
        assert placement.psi is not None and placement.psi[0] == 1.0
        assert placement.pi_estimate is not None and 0 < placement.pi_estimate < 1
