"""The build benchmark runs end to end on a small archive and reports every field."""

from __future__ import annotations

from service.bench.build_db import run_build_benchmark

FIELDS = {
    "docs",
    "seconds_load",
    "seconds_geometry",
    "seconds_store",
    "seconds_publish",
    "seconds_total",
    "seconds_version_load",
    "peak_rss_mb",
}


def test_report_has_every_field() -> None:
    report = run_build_benchmark(n_docs=300, geometry="shapes-only")
    assert set(report) >= FIELDS
    assert report["docs"] == report["documents_mapped"] == 300
    assert report["geometry"] == "shapes-only" and report["database"] == "sqlite"
    assert all(report[f] >= 0 for f in FIELDS - {"docs"})
