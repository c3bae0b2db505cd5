"""``tidemap bench map``: one JSON object on stdout with the module's fields, or a summary."""

from __future__ import annotations

import json

import pytest

from service.bench.map_export import CASES
from tests.bench.test_map_export_bench import CASE_FIELDS  # the benchmark's JSON fields
from tests.cli.conftest import Cli


def test_bench_map_prints_one_json_object(cli: Cli) -> None:
    run = cli("bench", "map", "--docs", "400", "--json")
    assert run.code == 0, run.err
    assert run.out.count("\n") == 1  # one line
    report = json.loads(run.out)
    assert set(report) == {"docs", "points", "repeats", "seconds_setup", "cases"}
    assert report["docs"] == 400 and report["points"] == 400 - 4 + 2
    assert len(report["cases"]) == len(CASES)
    for name, case in report["cases"].items():
        assert set(case) == CASE_FIELDS, name
        assert case["bytes_body"] > 0 and case["seconds_min"] > 0, name


def test_bench_map_summary_and_seed(cli: Cli) -> None:
    run = cli("bench", "map", "--docs", "200", "--seed", "3")
    assert run.code == 0, run.err
    lines = run.out.splitlines()
    assert lines[0].startswith("200 documents, 199 points")
    assert len(lines) == 1 + len(CASES) and "csv dims=3" in run.out


def test_bench_map_refuses_no_documents(cli: Cli, capsys: pytest.CaptureFixture[str]) -> None:
    with pytest.raises(SystemExit) as stop:
        cli("bench", "map", "--docs", "0")
    assert stop.value.code == 2
    assert "must be at least 1" in capsys.readouterr().err
