"""``tidemap build`` and ``tidemap worker`` (service/cli_build.py), with the fake geometry."""

from __future__ import annotations

import argparse
from collections.abc import Iterator

import pytest
from sqlalchemy.orm import Session, sessionmaker

from service.cli_build import cmd_build, cmd_worker, register
from service.storage.schema import upgrade
from service.storage.session import make_engine, make_session_factory
from tests.build_factories import add_collection, job
from tests.fake_compute import fake_compute_index


def parse(*argv: str) -> argparse.Namespace:
    parser = argparse.ArgumentParser(prog="tidemap")
    register(parser.add_subparsers())
    return parser.parse_args(list(argv))


@pytest.fixture
def make(sqlite_url: str) -> Iterator[sessionmaker[Session]]:
    engine = make_engine(sqlite_url)
    upgrade(engine)
    yield make_session_factory(engine)
    engine.dispose()


def test_build_queues_once_and_says_so(
    make: sessionmaker[Session], capsys: pytest.CaptureFixture[str]
) -> None:
    add_collection(make, "news", 4)
    assert cmd_build(parse("build", "news")) == 0
    first = capsys.readouterr()
    assert first.out.strip() == "1" and "is now queued" in first.err
    assert cmd_build(parse("build", "news", "--json")) == 0
    again = capsys.readouterr()
    assert '"existing": true' in again.out and "is already queued" in again.err


def test_build_here_runs_it_and_reports(
    make: sessionmaker[Session], capsys: pytest.CaptureFixture[str]
) -> None:
    add_collection(make, "news", 4)
    add_collection(make, "tiny", 2)
    assert cmd_build(parse("build", "news", "--here", "--quiet"), compute=fake_compute_index) == 0
    assert "build 1 succeeded: version 1" in capsys.readouterr().out
    assert cmd_build(parse("build", "tiny", "--here"), compute=fake_compute_index) == 1
    out = capsys.readouterr().out
    assert "build 2 failed: collection 'tiny' has 2 documents with terms" in out


def test_worker_once_runs_one_job(make: sessionmaker[Session]) -> None:
    add_collection(make, "news", 4)
    assert cmd_build(parse("build", "news")) == 0
    assert (
        cmd_worker(parse("worker", "--once", "--poll-seconds", "0.1"), compute=fake_compute_index)
        == 0
    )
    assert job(make, 1).state == "succeeded"


def test_worker_refuses_a_zero_poll(capsys: pytest.CaptureFixture[str]) -> None:
    with pytest.raises(SystemExit):
        parse("worker", "--poll-seconds", "0")
    assert "must be more than 0 seconds" in capsys.readouterr().err
