"""``tidemap bench query``: a small run through a real server, and the CLI around it."""

from __future__ import annotations

import json
from typing import Any

import pytest

from service.bench.query import (
    ENDPOINT_NAMES,
    ENDPOINTS,
    Inputs,
    LoadOptions,
    run_query_benchmark,
)
from tests.cli import conftest as cli_fixtures
from tests.cli.conftest import Cli

TOP_FIELDS = {
    "docs",
    "version",
    "concurrency",
    "seconds",
    "server_workers",
    "endpoints",
    "peak_rss_mb_server",
}
ENDPOINT_FIELDS = {"requests", "errors", "rps", "p50_ms", "p99_ms"}
ALWAYS_SERVED = {"document", "index"}  # served before the query endpoints existed
cli = cli_fixtures.cli  # the CLI runner fixture of tests/cli


@pytest.fixture(scope="module")
def database(tmp_path_factory: pytest.TempPathFactory) -> str:
    return f"sqlite:///{tmp_path_factory.mktemp('bench-query') / 'bench.db'}"


@pytest.fixture(scope="module")
def report(database: str) -> dict[str, Any]:
    options = LoadOptions(concurrency=4, seconds=1.0, warmup_seconds=0.3)
    return run_query_benchmark(n_docs=300, database_url=database, reuse=True, options=options)


@pytest.mark.slow
def test_report_has_the_interface_fields(report: dict[str, Any]) -> None:
    assert set(report) >= TOP_FIELDS
    assert (report["docs"], report["concurrency"], report["seconds"]) == (300, 4, 1.0)
    assert report["server_workers"] == 1 and report["version"] >= 1
    assert report["build"]["reused"] is False  # the database was empty
    assert report["peak_rss_mb_server"] > 0
    loaded = set(report["endpoints"])
    assert loaded | set(report["skipped_endpoints"]) | set(report["failed_endpoints"]) == set(
        ENDPOINT_NAMES
    )
    assert loaded >= ALWAYS_SERVED


@pytest.mark.slow
def test_every_served_endpoint_answers_under_load_without_errors(report: dict[str, Any]) -> None:
    assert report["failed_endpoints"] == {}  # a served route that never answers
    for name, result in report["endpoints"].items():
        assert set(result) >= ENDPOINT_FIELDS, name
        assert result["first_status"] == 200, (name, result.get("first_error"))
        assert result["requests"] > 0 and result["errors"] == 0, (name, result)
        assert 0 < result["p50_ms"] <= result["p99_ms"], name
        assert result["rps"] > 0 and result["server_cpu_seconds"] > 0, name


@pytest.mark.slow
def test_cli_reuses_the_stored_index(report: dict[str, Any], database: str, cli: Cli) -> None:
    run = cli(
        "bench", "query", "--docs", "300", "--database", database, "--reuse",
        "--endpoints", "index", "--seconds", "0.3", "--warmup-seconds", "0",
        "--concurrency", "2", "--json",
    )  # fmt: skip
    assert run.code == 0, run.err
    again = json.loads(run.out)
    assert again["build"] == {"reused": True}
    assert again["version"] == report["version"]  # no new build
    assert list(again["endpoints"]) == ["index"] and again["endpoints"]["index"]["requests"] > 0
    assert "reusing the index" in run.err


def test_cli_refuses_reuse_without_a_database_and_unknown_endpoints(cli: Cli) -> None:
    run = cli("bench", "query", "--reuse")
    assert run.code == 2 and "--reuse needs --database" in run.err
    run = cli("bench", "query", "--endpoints", "neighbors,nearby")
    assert run.code == 2 and "nearby" in run.err


def test_request_targets_use_stored_ids_and_unstored_drafts() -> None:
    import random

    inputs = Inputs("bench-query", ["b0000001", "b0000002"], ["a draft about tides"])
    rng = random.Random(0)
    targets = {e.name: e.target(inputs, rng) for e in ENDPOINTS}
    path, body = targets["neighbors"]
    assert path.startswith("/v1/collections/bench-query/documents/b000000") and body is None
    assert path.endswith("/neighbors?k=10")
    assert targets["similar"] == (
        "/v1/collections/bench-query/similar",
        {"text": "a draft about tides", "k": 10},
    )
    assert targets["distance"][0].startswith("/v1/collections/bench-query/distance?from=b000000")


def test_the_cli_runs_one_server_worker_per_usable_core_within_the_cap(
    monkeypatch: pytest.MonkeyPatch,
) -> None:
    from service import cli as cli_module

    def parsed_workers() -> int:
        args = cli_module.build_parser().parse_args(["bench", "query"])
        return int(args.server_workers)

    monkeypatch.setattr(cli_module.os, "sched_getaffinity", lambda pid: {0, 1})
    assert parsed_workers() == 2
    monkeypatch.setattr(cli_module.os, "sched_getaffinity", lambda pid: set(range(64)))
    assert parsed_workers() == cli_module.MAX_DEFAULT_SERVER_WORKERS
    monkeypatch.setattr(cli_module.os, "sched_getaffinity", lambda pid: {3})
    assert parsed_workers() == 1
    explicit = cli_module.build_parser().parse_args(["bench", "query", "--server-workers", "3"])
    assert explicit.server_workers == 3
