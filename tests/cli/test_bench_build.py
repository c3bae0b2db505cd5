"""``tidemap bench build``: one JSON object on stdout, progress on stderr."""

from __future__ import annotations

import json
from pathlib import Path

from tests.cli.conftest import Cli


def test_bench_build_prints_one_json_object(cli: Cli) -> None:
    run = cli("bench", "build", "--docs", "300", "--json")
    assert run.code == 0, run.err
    report = json.loads(run.out)
    assert report["docs"] == 300 and "seconds_total" in report
    assert "mapping 300 documents" in run.err


def test_bench_build_reads_a_jsonl_file(cli: Cli, tmp_path: Path) -> None:
    path = tmp_path / "archive.jsonl"
    words = ["harbour", "tide", "ferry", "storm", "pier", "gull", "fog", "dune"]
    lines = [
        json.dumps({"text": " ".join(words[(i + j) % 8] for j in range(4)) + f" note{i % 5}"})
        for i in range(40)
    ]
    path.write_text("\n".join(lines), encoding="utf-8")
    run = cli("bench", "build", "--docs", "30", "--input", str(path))
    assert run.code == 0, run.err
    assert run.out.startswith(f"30 documents ({path})")


def test_bench_build_refuses_a_missing_file(cli: Cli, tmp_path: Path) -> None:
    run = cli("bench", "build", "--input", str(tmp_path / "nope.jsonl"))
    assert run.code == 2
    assert "is not a file" in run.err
