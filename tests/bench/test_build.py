"""``service.bench.build``: the geometry benchmark reports every field, reads JSONL."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest

from service.bench.build import read_jsonl_counts, run_build_benchmark

FIELDS = {
    "docs",
    "vocab",
    "edges",
    "coords",
    "seconds_total",
    "seconds_graph",
    "seconds_spectrum",
    "seconds_groups",
    "peak_rss_mb",
    "knn_recall",
}


def test_report_has_every_field_and_compares_the_spectrum() -> None:
    report = run_build_benchmark(800, compare=True)
    assert set(report) >= FIELDS
    assert report["docs"] == 800 and report["source"] == "synthetic"
    assert report["knn_method"] == "exact" and report["knn_recall"] is None
    assert report["vocab"] > 0 and report["edges"] > 0 and report["coords"] >= 1
    stages = ("seconds_weighting", "seconds_graph", "seconds_spectrum", "seconds_groups")
    assert sum(report[s] for s in stages) <= report["seconds_total"] + 0.05
    assert report["peak_rss_mb"] >= report["peak_rss_mb_input"] > 0
    compared = report["spectrum_compare"]
    assert compared["nodes"] == report["largest_component"]
    assert compared["ratio_sklearn_over_ours"] > 0
    assert compared["max_subspace_angle"] < 1e-6  # both solvers found the same subspace
    json.dumps(report)  # plain JSON types only


def test_jsonl_is_tokenised_like_ingestion(tmp_path: Path) -> None:
    path = tmp_path / "docs.jsonl"
    rows = [{"title": "Tide Tables", "text": "tides and maps"}, {"text": "maps of the sea"}]
    path.write_text("\n".join(json.dumps(r) for r in rows) + "\n\n", encoding="utf-8")
    counts = read_jsonl_counts(path)
    assert counts.shape == (2, 5)  # tide, tables, tides, maps, sea ("and", "of", "the" stop)
    np.testing.assert_array_equal(np.asarray(counts.sum(axis=1)).ravel(), [4, 2])
    assert read_jsonl_counts(path, limit=1).shape[0] == 1
    path.write_text('{"text": "fine"}\n["not", "an", "object"]\n', encoding="utf-8")
    with pytest.raises(ValueError, match=r"docs.jsonl:2: not a JSON object with text"):
        read_jsonl_counts(path)
