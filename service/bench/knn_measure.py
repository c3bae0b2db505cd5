"""Measure the cosine k-NN graph on invented ~1 KB documents: time, memory, recall.

Not a test: a measurement to rerun when the search changes. Every size runs in
its own process so the peak resident memory is that size's alone.

    python -m service.bench.knn_measure --sizes 10000 30000 100000

For each size it generates counts (``service.bench.synthetic_text``), weights them
(``fit_tfidf`` with the defaults), collapses exact duplicates, then times
``cosine_knn`` with ``method="approximate"`` (its recall@k on a 1,000-row sample
is measured inside the call) and, up to ``--exact-max`` documents, with
``method="exact"`` (then the approximate graph's full recall against it is shown).
CPU seconds are reported next to wall seconds because a shared machine inflates
wall time.
"""

from __future__ import annotations

import argparse
import json
import multiprocessing as mp
import resource
import time
from typing import Any

import numpy as np

from service.bench.synthetic_text import synthetic_counts
from service.geometry.duplicates import exact_duplicate_groups
from service.geometry.kernel import self_tuning_affinity
from service.geometry.knn import cosine_knn, recall_at_k
from service.text.weighting import fit_tfidf


def measure(n_docs: int, k: int, exact_max: int, n_jobs: int, seed: int) -> dict[str, Any]:
    """One size: returns a flat dict of the measured quantities."""
    counts, _ = synthetic_counts(n_docs, rng=seed)
    t0 = time.perf_counter()
    tfidf = fit_tfidf(counts)
    t_weight = time.perf_counter() - t0
    keep = np.setdiff1d(np.arange(n_docs), tfidf.empty_rows)
    X = tfidf.matrix[keep]
    labels, wall, _ = _timed(lambda: exact_duplicate_groups(X))
    out_dup = wall
    X = X[np.flatnonzero(labels == np.arange(X.shape[0]))]
    out: dict[str, Any] = {
        "n_docs": n_docs,
        "vocabulary": int(tfidf.vocabulary.size),
        "nnz_per_row": round(X.nnz / X.shape[0], 1),
        "duplicates_collapsed": int(keep.size - X.shape[0]),
        "weighting_s": round(t_weight, 2),
        "duplicates_s": out_dup,
    }
    approx, wall, cpu = _timed(
        lambda: cosine_knn(X, k, method="approximate", n_jobs=n_jobs, rng=seed)
    )
    out |= {"approx_wall_s": wall, "approx_cpu_s": cpu, "approx_recall_sample": approx.recall}
    _, wall, _ = _timed(lambda: self_tuning_affinity(approx))
    out["affinity_wall_s"] = wall
    if X.shape[0] <= exact_max:
        exact, wall, cpu = _timed(lambda: cosine_knn(X, k, method="exact", n_jobs=n_jobs))
        out |= {
            "exact_wall_s": wall,
            "exact_cpu_s": cpu,
            "approx_recall_full": round(recall_at_k(approx.indices, exact.indices), 4),
        }
    out["peak_rss_mib"] = round(resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024)
    return out


def _timed(fn: Any) -> tuple[Any, float, float]:
    t0, c0 = time.perf_counter(), time.process_time()
    result = fn()
    return result, round(time.perf_counter() - t0, 2), round(time.process_time() - c0, 2)


def _child(args: tuple[int, int, int, int, int], queue: Any) -> None:
    queue.put(measure(*args))


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--sizes", type=int, nargs="+", default=[10_000, 30_000, 100_000])
    parser.add_argument("--k", type=int, default=15)
    parser.add_argument("--exact-max", type=int, default=30_000)
    parser.add_argument("--n-jobs", type=int, default=2)
    parser.add_argument("--seed", type=int, default=1)
    ns = parser.parse_args(argv)
    ctx = mp.get_context("spawn")
    for n in ns.sizes:
        queue = ctx.Queue()
        proc = ctx.Process(target=_child, args=((n, ns.k, ns.exact_max, ns.n_jobs, ns.seed), queue))
        proc.start()
        result = queue.get()
        proc.join()
        print(json.dumps(result), flush=True)


if __name__ == "__main__":
    main()
