from __future__ import annotations

import os
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

import pytest

from service.cli import main


@dataclass(frozen=True)
class Run:
    code: int
    out: str
    err: str


Cli = Callable[..., Run]


@pytest.fixture
def clean_env(monkeypatch: pytest.MonkeyPatch) -> pytest.MonkeyPatch:
    """No TIDEMAP_* variable of the surrounding shell leaks into a test."""
    for name in list(os.environ):
        if name.startswith("TIDEMAP_"):
            monkeypatch.delenv(name)
    return monkeypatch


@pytest.fixture
def sqlite_url(clean_env: pytest.MonkeyPatch, tmp_path: Path) -> str:
    """TIDEMAP_DATABASE_URL pointing at a SQLite file that does not exist yet."""
    url = f"sqlite:///{tmp_path / 'cli.db'}"
    clean_env.setenv("TIDEMAP_DATABASE_URL", url)
    return url


@pytest.fixture
def cli(capsys: pytest.CaptureFixture[str]) -> Cli:
    """Call ``tidemap ARGS...`` in-process; returns its exit code and captured output."""

    def run(*argv: str) -> Run:
        capsys.readouterr()  # drop anything printed before
        code = main(list(argv))
        captured = capsys.readouterr()
        return Run(code, captured.out, captured.err)

    return run
