"""``service.bench.map_export``: the invented index and what the benchmark reports."""

from __future__ import annotations

import csv
import io
import json
from typing import Any

import numpy as np
import pytest

from service.bench.map_export import (
    CASES,
    SHARES,
    fresh,
    run_map_benchmark,
    synthetic_live,
    traced_write,
)
from service.pipeline.map_export import CHUNK, csv_chunks, json_chunks, prepare_map
from service.pipeline.query_view import ISOLATED, MAPPED, NO_TERMS

N = 3_000
CASE_FIELDS = {
    "seconds_min",
    "seconds_max",
    "seconds_first",
    "bytes_body",
    "mb_body",
    "pieces",
    "mb_largest_piece",
    "mb_peak_allocated",
    "mb_peak_allocated_first",
    "mb_kept_first",
}


def case_name(fmt: str, dims: int, t: float | None) -> str:
    return f"{fmt} dims={dims} t={'default' if t is None else t}"


def cached_bytes(value: Any) -> int:
    if isinstance(value, np.ndarray):
        return value.nbytes
    if isinstance(value, tuple | list):
        return sum(cached_bytes(v) for v in value)
    return 0


@pytest.fixture(scope="module")
def report() -> dict[str, Any]:
    return run_map_benchmark(N, seed=1, repeats=2)


def test_invented_index_has_the_documented_mix() -> None:
    live = synthetic_live(N, seed=1)
    view = live.view
    status = view.status
    assert (status == NO_TERMS).sum() == N // 200 and (status == ISOLATED).sum() == N // 100
    assert live.hidden.sum() == N // 100 and len(live.provisional) == N // 200
    sizes = np.array([m.size for m in view.members])
    assert sizes.sum() == (status == MAPPED).sum()
    assert np.allclose(sizes / sizes.sum(), SHARES, atol=2 / sizes.sum())
    mapped_vertices = view.vertex[status == MAPPED]
    assert (view.component[mapped_vertices] >= 0).all()
    assert (view.component[view.vertex[status == ISOLATED]] == -1).all()
    assert any("\n" in t for t in view.titles) and any('"' in t for t in view.titles)


def test_the_report_names_every_case_with_every_field(report: dict[str, Any]) -> None:
    assert set(report) == {"docs", "points", "repeats", "seconds_setup", "cases"}
    assert report["docs"] == N and report["repeats"] == 2
    assert report["points"] == N - N // 100 + N // 200
    assert list(report["cases"]) == [case_name(*case) for case in CASES]
    formats_dims = {(fmt, dims) for fmt, dims, _ in CASES}
    assert formats_dims == {("json", 2), ("json", 3), ("csv", 2), ("csv", 3)}
    for name, case in report["cases"].items():
        assert set(case) == CASE_FIELDS, name
        assert 0 < case["seconds_min"] <= case["seconds_max"], name
        assert case["seconds_first"] > 0, name


@pytest.mark.parametrize(("fmt", "dims", "t"), CASES)
def test_bytes_and_pieces_are_those_of_the_whole_answer(
    report: dict[str, Any], fmt: str, dims: int, t: float | None
) -> None:
    case = report["cases"][case_name(fmt, dims, t)]
    export = prepare_map(synthetic_live(N, seed=1), dims, t, fmt, {})
    pieces = list((json_chunks if fmt == "json" else csv_chunks)(export))
    body = b"".join(pieces)
    assert case["bytes_body"] == len(body)
    assert case["pieces"] == len(pieces)
    assert case["mb_largest_piece"] == round(max(map(len, pieces)) / 2**20, 2)
    if fmt == "json":
        points = json.loads(body)["points"]
        assert len(points) == report["points"]
        assert len(pieces) == 2 + -(-report["points"] // CHUNK)
    else:
        rows = list(csv.reader(io.StringIO(body.decode("utf-8"), newline="")))
        assert len(rows) == 1 + report["points"] and len(rows[0]) == 5 + dims


def test_fresh_empties_the_caches_and_shares_the_arrays() -> None:
    live = synthetic_live(500, seed=3)
    prepare_map(live, 2, None, "json", {})
    assert live.view._cache  # the answer filled them
    again = fresh(live)
    assert again.view._cache == {} and live.view._cache
    assert again.view.version.arrays["psi"] is live.view.version.arrays["psi"]


def test_peak_is_above_the_index_and_kept_is_the_caches() -> None:
    live = synthetic_live(N, seed=5)
    index = fresh(live)
    peak_first, kept_first = traced_write(index, 2, None, "json")
    cached = cached_bytes(list(index.view._cache.values()))
    assert cached > 0
    assert cached <= kept_first < cached + 64 * 1024  # what stays is the caches
    assert peak_first >= kept_first
    peak, kept = traced_write(index, 2, None, "json")
    assert kept < 64 * 1024  # a warm answer leaves nothing behind
    largest = max(map(len, json_chunks(prepare_map(index, 2, None, "json", {}))))
    psi = live.view.version.arrays["psi"]
    assert largest <= peak < peak_first  # the index's own arrays are not counted
    assert peak < psi.nbytes + cached
