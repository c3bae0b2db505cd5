"""Speed of the whole geometry of a build: ``tidemap bench build``.

Runs `service.pipeline.mapping.map_corpus` (weighting, duplicates, k-NN graph, kernel,
components, diffusion maps, coordinates, groups, label terms) on invented term counts
(`service.bench.synthetic_text.synthetic_counts`) or on the texts of a JSONL file,
tokenised the way ingestion does (``title + "\\n" + text`` through the English
tokenizer). No database: the figures are the numerics alone. Preparing the input is
timed apart (``seconds_input``) and is not part of ``seconds_total``.

With ``compare=True`` the spectrum of the largest component is also computed by
scikit-learn's ``spectral_embedding`` on the same affinity matrix
(`service.bench.spectrum_compare.compare_with_sklearn`), both timed in this run.
"""

from __future__ import annotations

import contextlib
import json
import os
import resource
import sys
import time
from collections.abc import Callable
from pathlib import Path
from typing import Any

import numpy as np
import scipy.sparse as sp

from service.bench.spectrum_compare import compare_with_sklearn
from service.bench.synthetic_text import synthetic_counts
from service.geometry.knn import KnnGraph
from service.pipeline.mapping import CorpusMap, MapParams, map_corpus
from service.pipeline.mapping_graph import graph_affinity
from service.text.tokenize import make_tokenizer

Progress = Callable[[str], None]


def _quiet(message: str) -> None:
    return None


def _peak_rss_mb() -> float:
    # Linux reports ru_maxrss in KiB. It is the VmHWM mark, so `_reset_peak` resets it too:
    # the process peak is the larger of the marks before and after the reset.
    return round(resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024, 1)


def _reset_peak() -> bool:
    """Reset the kernel's peak-RSS mark (VmHWM) to the current RSS, where Linux allows it.

    Inventing 300,000 documents peaks higher than mapping them; without the reset the
    process peak would hide the map's own.
    """
    try:
        Path("/proc/self/clear_refs").write_text("5")
    except OSError:
        return False
    return True


def _vm_hwm_mb() -> float | None:
    try:
        for line in Path("/proc/self/status").read_text().splitlines():
            if line.startswith("VmHWM:"):
                return round(int(line.split()[1]) / 1024, 1)
    except OSError:
        pass
    return None


def read_jsonl_counts(path: Path, limit: int | None = None) -> sp.csr_matrix:
    """Raw term counts of the first ``limit`` documents of a JSONL file.

    Each line is a JSON object with ``text`` (and optionally ``title``); blank lines are
    skipped. Raises ValueError naming the line of a line that is not such an object.
    """
    tokenizer = make_tokenizer("english")
    vocabulary: dict[str, int] = {}
    indptr = [0]
    indices: list[int] = []
    values: list[int] = []
    with path.open(encoding="utf-8") as lines:
        for number, line in enumerate(lines, start=1):
            if limit is not None and len(indptr) > limit:
                break
            if not line.strip():
                continue
            try:
                doc = json.loads(line)
                text = f"{doc.get('title', '')}\n{doc['text']}"
            except (ValueError, KeyError, TypeError, AttributeError) as exc:
                raise ValueError(f"{path}:{number}: not a JSON object with text ({exc})") from exc
            for term, count in tokenizer.count(text).items():
                indices.append(vocabulary.setdefault(term, len(vocabulary)))
                values.append(count)
            indptr.append(len(indices))
    counts = sp.csr_matrix(
        (np.array(values, dtype=np.int64), np.array(indices, dtype=np.int64), np.array(indptr)),
        shape=(len(indptr) - 1, len(vocabulary)),
    )
    counts.sort_indices()
    return counts


def _largest_component_affinity(result: CorpusMap) -> sp.csr_matrix:
    """The affinity of the largest mapped component, rebuilt from the stored k-NN lists
    with the rule the map used (`graph_affinity`, unrelated pairs dropped)."""
    knn = KnnGraph(
        result.knn_indices.astype(np.int64),
        result.knn_distances.astype(np.float64),
        "exact",
        None,
        "cosine",
    )
    W = graph_affinity(knn, unrelated=1.0).weights
    members = np.flatnonzero(result.component == 0)
    return sp.csr_matrix(W[members][:, members])


def run_build_benchmark(
    n_docs: int,
    *,
    input_path: Path | None = None,
    compare: bool = False,
    seed: int = 0,
    params: MapParams | None = None,
    progress: Progress = _quiet,
) -> dict[str, Any]:
    """Map ``n_docs`` documents and report sizes, stage times and peak memory.

    Returns a dict with ``docs``, ``vocab``, ``edges``, ``coords``, ``seconds_total``,
    ``seconds_weighting``, ``seconds_graph`` (k-NN and kernel), ``seconds_spectrum``,
    ``seconds_groups`` (coordinates, k-means, label terms), ``peak_rss_mb``,
    ``knn_recall`` (None for an exact graph) and the details listed in the code; with
    ``compare``, ``spectrum_compare`` holds both solvers' times and their ratio.
    """
    params = params or MapParams(seed=seed)
    start = time.perf_counter()
    if input_path is None:
        progress(f"inventing {n_docs} documents")
        counts, _ = synthetic_counts(n_docs, rng=seed)
        source = "synthetic"
    else:
        progress(f"reading and tokenising {input_path}")
        counts = read_jsonl_counts(input_path, limit=n_docs)
        source = str(input_path)
    seconds_input = time.perf_counter() - start
    rss_input = _peak_rss_mb()
    hwm_reset = _reset_peak()
    progress(f"mapping {counts.shape[0]} documents")
    start = time.perf_counter()
    result = map_corpus(counts, params, lambda stage, _f: None)
    seconds_total = time.perf_counter() - start
    map_peak = _vm_hwm_mb() if hwm_reset else None
    stats = result.statistics
    seconds = stats["seconds"]
    report: dict[str, Any] = {
        "docs": int(counts.shape[0]),
        "source": source,
        "vocab": stats["vocabulary"],
        "vertices": stats["vertices"],
        "duplicates": stats["duplicates"],
        "edges": stats["edges"],
        "coords": stats["coordinates"],
        "groups": stats["groups"],
        "components": len(stats["components"]),
        "largest_component": stats["components"][0] if stats["components"] else 0,
        "isolated_documents": stats["documents_isolated"],
        "knn_method": stats["knn_method"],
        "knn_recall": stats["knn_recall"],
        "solvers": stats["solvers"],
        "seconds_input": round(seconds_input, 2),
        "seconds_total": round(seconds_total, 2),
        "seconds_weighting": seconds["weighting"],
        "seconds_graph": seconds["graph"],
        "seconds_spectrum": seconds["spectrum"],
        "seconds_spectrum_largest": stats["solver_seconds"][0] if stats["solver_seconds"] else 0,
        "seconds_groups": seconds["groups"],
        "peak_rss_mb": max(rss_input, _peak_rss_mb()),
        "peak_rss_mb_input": rss_input,
        # Peak while mapping (input held in memory included); None where not measurable.
        "peak_rss_mb_map": map_peak,
        "cpus": len(os.sched_getaffinity(0)),
        "neighbors": params.neighbors,
        "max_coordinates": params.max_coordinates,
    }
    if compare and stats["components"]:
        progress("spectrum of the largest component: ours (alpha = 0) and scikit-learn")
        W = _largest_component_affinity(result)
        # compare_with_sklearn prints a line; keep stdout for the one JSON object.
        with contextlib.redirect_stdout(sys.stderr):
            compared = compare_with_sklearn(W, params.max_coordinates + 2)
        report["spectrum_compare"] = {
            "nodes": int(W.shape[0]),
            "ours_seconds": round(float(compared["ours_s"]), 2),
            "ours_solver": compared["ours_solver"],
            "sklearn_seconds": round(float(compared["sklearn_s"]), 2),
            "sklearn_solver": "arpack",
            "ratio_sklearn_over_ours": round(float(compared["ratio"]), 2),
            "max_subspace_angle": float(compared["max_angle"]),
        }
        report["peak_rss_mb"] = max(rss_input, _peak_rss_mb())
    return report


def format_report(report: dict[str, Any]) -> str:
    lines = [
        f"{report['docs']} documents ({report['source']}), {report['vertices']} distinct, "
        f"vocabulary {report['vocab']}, {report['edges']} edges, "
        f"{report['components']} component(s), largest {report['largest_component']}",
        f"  k-NN {report['knn_method']}, recall {report['knn_recall']}; "
        f"{report['coords']} coordinates, {report['groups']} groups",
        f"  total {report['seconds_total']:.2f} s = weighting {report['seconds_weighting']:.2f}"
        f" + graph {report['seconds_graph']:.2f} + spectrum {report['seconds_spectrum']:.2f}"
        f" (largest component {report['seconds_spectrum_largest']:.2f})"
        f" + groups {report['seconds_groups']:.2f}; input {report['seconds_input']:.2f} s",
        f"  peak RSS {report['peak_rss_mb']} MiB: {report['peak_rss_mb_input']} by the end of"
        f" the input, {report['peak_rss_mb_map']} while mapping",
    ]
    if "spectrum_compare" in report:
        c = report["spectrum_compare"]
        lines.append(
            f"  spectrum of {c['nodes']} nodes: ours {c['ours_seconds']} s ({c['ours_solver']}),"
            f" scikit-learn {c['sklearn_seconds']} s, ratio {c['ratio_sklearn_over_ours']},"
            f" max angle {c['max_subspace_angle']:.1e}"
        )
    return "\n".join(lines)
