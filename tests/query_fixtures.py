"""A real, built collection for the query tests: standard-library docstrings.

Texts nobody on the project wrote (tests/stdlib_corpus.py), a few modules of them, stored
through the ingest use case and built by a real worker with the real geometry, so the
query tests see what a user would.
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import UTC, datetime, timedelta
from typing import Any

from sqlalchemy import Engine

from service.pipeline.index_content import compute_index
from tests.build_factories import add_collection, factory, queue, run_until_finished, upsert, worker
from tests.stdlib_corpus import MODULES, stdlib_corpus

# Modules with distinct subjects; at most PER_MODULE docstrings of each keep the build
# to about a second.
QUERY_MODULES = ("decimal", "imaplib", "logging", "tarfile", "threading", "ipaddress")
PER_MODULE = 40


@dataclass(frozen=True)
class BuiltCollection:
    name: str
    documents: list[dict[str, Any]]
    module_of: dict[str, str]  # external id -> module name


def stdlib_documents() -> tuple[list[dict[str, Any]], dict[str, str]]:
    corpus = stdlib_corpus()
    docs: list[dict[str, Any]] = []
    module_of: dict[str, str] = {}
    start = datetime(2024, 1, 15, tzinfo=UTC)
    for module in QUERY_MODULES:
        label = MODULES.index(module)
        rows = [i for i, lab in enumerate(corpus.labels.tolist()) if lab == label][:PER_MODULE]
        for j, row in enumerate(rows):
            ident = f"{module}-{j}"
            text = corpus.texts[row]
            docs.append(
                {
                    "id": ident,
                    "title": f"{module}: {text.split(chr(10))[0][:60]}",
                    "text": text,
                    "published_at": (start + timedelta(days=9 * len(docs))).isoformat(),
                }
            )
            module_of[ident] = module
    return docs, module_of


def build(engine: Engine, name: str) -> int:
    """Queue and run one real build of the collection; the job's id."""
    make = factory(engine)
    job_id = queue(make, name)
    row = run_until_finished(worker(make, compute=compute_index), make, job_id)
    assert row.state == "succeeded", row.error
    return job_id


def built_collection(
    engine: Engine, name: str = "stdlib", settings: dict[str, Any] | None = None
) -> BuiltCollection:
    docs, module_of = stdlib_documents()
    make = factory(engine)
    add_collection(make, name, 0, settings)
    upsert(make, name, docs)
    build(engine, name)
    return BuiltCollection(name, docs, module_of)
