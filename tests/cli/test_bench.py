"""``tidemap bench ingest``: the invented text and one tiny run through a real server."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from service.bench.ingest import invented_documents, invented_vocabulary
from service.pipeline.document_input import parse_document
from tests.cli.conftest import Cli


def test_invented_documents_are_reproducible_and_about_1_kb() -> None:
    docs = invented_documents(200, seed=3)
    assert docs == invented_documents(200, seed=3)
    assert docs != invented_documents(200, seed=4)
    sizes = [len(d["text"].encode()) for d in docs]
    assert min(sizes) >= 990 and max(sizes) < 1300
    assert len({d["id"] for d in docs}) == 200
    for doc in docs:
        parse_document(doc, max_text_bytes=10_000)  # raises if the API would reject it


def test_vocabulary_is_distinct_and_starts_with_function_words() -> None:
    import numpy as np

    words = invented_vocabulary(3000, np.random.default_rng(0))
    assert len(set(words)) == 3000
    assert words[:3] == ["the", "of", "and"]


@pytest.mark.slow
def test_bench_ingest_end_to_end(cli: Cli, clean_env: pytest.MonkeyPatch, tmp_path: Path) -> None:
    url = f"sqlite:///{tmp_path / 'bench.db'}"
    run = cli("bench", "ingest", "--docs", "30", "--database", url, "--json")
    assert run.code == 0, run.err
    report = json.loads(run.out)
    assert report["database"] == "sqlite"
    for path in ("json_batch", "ndjson"):
        result = report[path]
        assert result["docs"] == 30 and result["inserted"] == 30
        assert result["seconds"] > 0 and result["docs_per_second"] > 0
        assert result["peak_rss_mb"] > 0
