"""Time and memory of writing a whole map (GET .../map): ``python -m service.bench.map_export``.

The answer is written from a `Live` object in memory, so this measures the writer alone
on an invented one of N documents (no database, no build, no HTTP): components of very
different sizes (60/30/9/0.9/0.1 % of the vertices) plus 1 % isolated and 0.5 % without
terms, 41 eigenvector columns, 20 groups, titles of 20-90 characters (some with commas,
quotes and line breaks), 1 % of the rows hidden (deleted) and 0.5 % provisional documents.

Each case (format, dims, t) is timed from `prepare_map` to the last byte, every piece
consumed and dropped as a server sends it. The first answer of an index (``*_first``)
also fills the view's per-component caches (a copy of each component's eigenvectors and
its coordinates at the default t), which the query endpoints share and which stay; the
repeats (``seconds_min``/``seconds_max``) find them filled. Peak memory is the largest
amount Python allocated (tracemalloc, numpy included) above what the `Live` object held
when the answer started, in runs apart from the timed ones (tracing slows allocation);
``mb_kept_first`` is what the first answer left in the caches. Measures speed, never the
answers' meaning.
"""

from __future__ import annotations

import argparse
import json
import time
import tracemalloc
from collections.abc import Callable, Iterator
from dataclasses import replace
from datetime import UTC, datetime
from typing import Any

import numpy as np
import scipy.sparse as sp

from service.pipeline.index_content_types import GroupRecord
from service.pipeline.live_index import ComponentExtras, Live, ProvisionalDoc
from service.pipeline.map_export import MapExport, csv_chunks, json_chunks, prepare_map
from service.pipeline.placement import Placement
from service.pipeline.query_view import ISOLATED, MAPPED, NO_TERMS, QueryView
from service.pipeline.version_cache import LoadedVersion
from service.text.tokenize import make_tokenizer

SHARES = (0.6, 0.3, 0.09, 0.009, 0.001)  # component sizes, as shares of mapped vertices
K = 41  # eigenvector columns kept (trivial one included), as the real build
N_GROUPS = 20
# (format, dims, t): both formats at 2 and 3 dims at the default t, and JSON at another t
CASES: tuple[tuple[str, int, float | None], ...] = (
    ("json", 2, None),
    ("json", 3, None),
    ("csv", 2, None),
    ("csv", 3, None),
    ("json", 2, 3.0),
)
WORDS = ("harbour", "tide", "council", "ferry", "quay", "storm", "market", "pier", "vote")


def _title(rng: np.random.Generator, i: int) -> str:
    words = rng.choice(WORDS, size=int(rng.integers(3, 12))).tolist()
    title = f"{i}: " + " ".join(words)
    if i % 7 == 0:
        title += ', "quoted", and more'
    if i % 101 == 0:
        title += "\nsecond line"
    return title


def synthetic_live(n_docs: int, seed: int = 0) -> Live:
    """An invented `Live` index of ``n_docs`` rows (only what the map reads is real)."""
    rng = np.random.default_rng(seed)
    n_hidden, n_new = n_docs // 100, n_docs // 200
    status = np.full(n_docs, MAPPED, dtype=np.int8)
    status[rng.choice(n_docs, n_docs // 200, replace=False)] = NO_TERMS
    on_graph = np.flatnonzero(status != NO_TERMS)
    isolated = rng.choice(on_graph, n_docs // 100, replace=False)
    status[isolated] = ISOLATED
    vertex = np.full(n_docs, -1, dtype=np.int64)
    vertex[on_graph] = np.arange(on_graph.size)
    n_v = on_graph.size
    component = np.full(n_v, -1, dtype=np.int32)
    mapped_vertices = vertex[status == MAPPED]
    cuts = np.cumsum(np.array(SHARES) * mapped_vertices.size).astype(np.int64)[:-1]
    for c, part in enumerate(np.split(rng.permutation(mapped_vertices), cuts)):
        component[part] = c
    members = [np.flatnonzero(component == c).astype(np.int64) for c in range(len(SHARES))]
    local = np.full(n_v, -1, dtype=np.int64)
    for idx in members:
        local[idx] = np.arange(idx.size)
    psi = rng.standard_normal((n_v, K))
    psi[:, 0] = 1.0
    eigenvalues = np.tile(np.linspace(1.0, 0.3, K), (len(SHARES), 1))
    stable = rng.integers(0, N_GROUPS, size=n_docs).astype(np.int64)
    stable[status != MAPPED] = -1
    arrays: dict[str, np.ndarray] = {
        "psi": psi,
        "pi": np.full(n_v, 1.0 / n_v),
        "eigenvalues": eigenvalues,
        "n_coordinates": np.full(len(SHARES), K - 1, dtype=np.int64),
        "stable_group": stable,
    }
    groups = tuple(
        GroupRecord(
            stable_id=g,
            size=int((stable == g).sum()),
            label_terms=[
                {"term": w, "score": 1.0 / (j + 1), "count": 1} for j, w in enumerate(WORDS)
            ],
            representatives=[],
        )
        for g in range(N_GROUPS)
    )
    version = LoadedVersion(
        collection_id=1,
        collection="bench-map",
        version_id=1,
        number=1,
        published_at=None,
        arrays=arrays,
        groups=groups,
        statistics={},
        parameters={},
        load_seconds=0.0,
    )
    ids = [f"b{i:07d}" for i in range(n_docs)]
    empty = sp.csr_matrix((n_docs, 1))
    view = QueryView(
        version=version,
        doc_ids=np.arange(1, n_docs + 1, dtype=np.int64),
        external_ids=ids,
        titles=[_title(rng, i) for i in range(n_docs)],
        row_of_external={e: i for i, e in enumerate(ids)},
        status=status,
        vertex=vertex,
        vertex_rows_indptr=np.arange(n_v + 1, dtype=np.int64),
        vertex_rows=on_graph.astype(np.int64),
        component=component,
        local=local,
        members=members,
        tfidf=empty,
        vertex_tfidf_csc=empty.tocsc(),
        vertex_doc=on_graph.astype(np.int64),
        term_column={},
        global_term_column={},
        tokenizer=make_tokenizer("english", False),
        neighbors=15,
        alpha=0.5,
        default_t=1.0,
        sigma=np.ones(n_v),
        sigma_floor=0.0,
    )
    hidden = np.zeros(n_docs, dtype=bool)
    hidden[rng.choice(n_docs, n_hidden, replace=False)] = True
    provisional = []
    by_component: dict[int, list[int]] = {}
    for j in range(n_new):
        c = int(rng.integers(0, len(SHARES)))
        p_psi = rng.standard_normal(K)
        p_psi[0] = 1.0
        placement = Placement(empty[:1], c, p_psi, None, np.zeros(0, np.int64), np.zeros(0))
        provisional.append(
            ProvisionalDoc(
                doc_id=n_docs + 1 + j,
                external_id=f"new-{j}",
                title=_title(rng, n_docs + j),
                revision=1,
                published_at=datetime(2024, 1, 1, tzinfo=UTC),
                placement=placement,
                group=int(rng.integers(0, N_GROUPS)),
            )
        )
        by_component.setdefault(c, []).append(j)
    extras = {
        c: ComponentExtras(
            docs=docs,
            psi=np.vstack([provisional[j].placement.psi for j in docs]),  # type: ignore[union-attr,misc]
            pi=np.full(len(docs), np.nan),
        )
        for c, docs in by_component.items()
    }
    return Live(
        view=view,
        change_count=1,
        hidden=hidden,
        provisional=provisional,
        by_external={p.external_id: i for i, p in enumerate(provisional)},
        extras=extras,
    )


Writer = Callable[[MapExport], Iterator[bytes]]


def _write(live: Live, dims: int, t: float | None, fmt: str) -> tuple[int, int, int]:
    """Prepare and write one answer; (bytes, pieces, largest piece)."""
    export = prepare_map(live, dims, t, fmt, {})
    writer: Writer = json_chunks if fmt == "json" else csv_chunks
    total = pieces = largest = 0
    for piece in writer(export):
        total += len(piece)
        pieces += 1
        largest = max(largest, len(piece))
    return total, pieces, largest


def fresh(live: Live) -> Live:
    """The same index as just loaded: its view's caches empty (the arrays are shared)."""
    return replace(live, view=replace(live.view, _cache={}))


def traced_write(live: Live, dims: int, t: float | None, fmt: str) -> tuple[int, int]:
    """(peak, still held after the answer) bytes allocated while writing one answer."""
    tracemalloc.start()
    try:
        _write(live, dims, t, fmt)
        kept, peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    return peak, kept


def run_map_benchmark(n_docs: int, seed: int = 0, repeats: int = 3) -> dict[str, Any]:
    started = time.perf_counter()
    live = synthetic_live(n_docs, seed)
    setup = time.perf_counter() - started
    points = int((~live.hidden).sum()) + len(live.provisional)
    cases: dict[str, Any] = {}
    for fmt, dims, t in CASES:
        name = f"{fmt} dims={dims} t={'default' if t is None else t}"
        index = fresh(live)
        begin = time.perf_counter()
        size, pieces, largest = _write(index, dims, t, fmt)
        first = time.perf_counter() - begin
        seconds = []
        for _ in range(repeats):  # the caches the first answer filled are kept, as served
            begin = time.perf_counter()
            size, pieces, largest = _write(index, dims, t, fmt)
            seconds.append(time.perf_counter() - begin)
        peak, _ = traced_write(index, dims, t, fmt)
        peak_first, kept_first = traced_write(fresh(live), dims, t, fmt)
        cases[name] = {
            "seconds_min": round(min(seconds), 3),
            "seconds_max": round(max(seconds), 3),
            "seconds_first": round(first, 3),
            "bytes_body": size,
            "mb_body": round(size / 2**20, 1),
            "pieces": pieces,
            "mb_largest_piece": round(largest / 2**20, 2),
            "mb_peak_allocated": round(peak / 2**20, 1),
            "mb_peak_allocated_first": round(peak_first / 2**20, 1),
            "mb_kept_first": round(kept_first / 2**20, 1),
        }
    return {
        "docs": n_docs,
        "points": points,
        "repeats": repeats,
        "seconds_setup": round(setup, 2),
        "cases": cases,
    }


def format_report(report: dict[str, Any]) -> str:
    lines = [
        f"{report['docs']} documents, {report['points']} points "
        f"(invented index, {report['seconds_setup']} s to make)"
    ]
    for name, case in report["cases"].items():
        lines.append(
            f"  {name:<22} {case['seconds_min']:.3f}-{case['seconds_max']:.3f} s "
            f"(first {case['seconds_first']:.3f} s), {case['bytes_body']} bytes in "
            f"{case['pieces']} pieces, peak {case['mb_peak_allocated']} MB "
            f"(first {case['mb_peak_allocated_first']} MB, {case['mb_kept_first']} MB kept)"
        )
    return "\n".join(lines)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("n_docs", type=int, nargs="?", default=100_000)
    parser.add_argument("--seed", type=int, default=0)
    parser.add_argument("--repeats", type=int, default=3)
    args = parser.parse_args()
    print(json.dumps(run_map_benchmark(args.n_docs, args.seed, args.repeats), indent=2))


if __name__ == "__main__":
    main()
