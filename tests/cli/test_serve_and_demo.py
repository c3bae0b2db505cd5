from __future__ import annotations

from pathlib import Path
from typing import Any

import pytest
from alembic import command
from sqlalchemy import text

from service.pipeline.collections import get_collection
from service.pipeline.keys import KeyVerifier
from service.storage.schema import alembic_config, schema_status, upgrade
from service.storage.session import make_engine, make_session_factory
from tests.cli.conftest import Cli


@pytest.fixture
def uvicorn_calls(monkeypatch: pytest.MonkeyPatch) -> list[tuple[Any, dict[str, Any]]]:
    """Record uvicorn.run instead of serving."""
    calls: list[tuple[Any, dict[str, Any]]] = []
    monkeypatch.setattr("uvicorn.run", lambda app, **kw: calls.append((app, kw)))
    return calls


def _behind(url: str) -> None:
    """A database that was migrated and then downgraded: tables left, schema behind."""
    engine = make_engine(url)
    upgrade(engine)
    config = alembic_config()
    with engine.begin() as conn:
        config.attributes["connection"] = conn
        command.downgrade(config, "base")
    engine.dispose()


def _state(url: str) -> str:
    engine = make_engine(url)
    try:
        return schema_status(engine).state
    finally:
        engine.dispose()


def test_serve_refuses_a_database_that_is_behind(
    cli: Cli, sqlite_url: str, uvicorn_calls: list[Any]
) -> None:
    _behind(sqlite_url)
    run = cli("serve", "--port", "8123")
    assert run.code == 2
    assert "tidemap db upgrade" in run.err
    assert len(run.err.strip().splitlines()) == 1
    assert uvicorn_calls == []
    assert _state(sqlite_url) == "behind"


def test_serve_auto_upgrade(
    cli: Cli, sqlite_url: str, uvicorn_calls: list[Any], monkeypatch: pytest.MonkeyPatch
) -> None:
    _behind(sqlite_url)
    monkeypatch.setenv("TIDEMAP_AUTO_UPGRADE", "1")
    run = cli("serve", "--host", "127.0.0.1", "--port", "8123")
    assert run.code == 0, run.err
    assert _state(sqlite_url) == "current"
    (_app, options), *_ = uvicorn_calls
    assert options["port"] == 8123
    assert options["host"] == "127.0.0.1"


def test_serve_upgrades_a_fresh_sqlite_file(
    cli: Cli, sqlite_url: str, uvicorn_calls: list[Any]
) -> None:
    run = cli("serve")
    assert run.code == 0, run.err
    assert _state(sqlite_url) == "current"
    assert len(uvicorn_calls) == 1


def test_serve_refuses_a_sqlite_file_holding_other_tables(
    cli: Cli, sqlite_url: str, uvicorn_calls: list[Any]
) -> None:
    engine = make_engine(sqlite_url)
    with engine.begin() as conn:
        conn.execute(text("CREATE TABLE notes (body TEXT)"))
    engine.dispose()
    assert cli("serve").code == 2
    assert uvicorn_calls == []


def test_serve_with_workers_runs_the_worker_pool(
    cli: Cli, sqlite_url: str, uvicorn_calls: list[Any], monkeypatch: pytest.MonkeyPatch
) -> None:
    pools: list[tuple[tuple[Any, ...], dict[str, Any]]] = []
    monkeypatch.setattr(
        "service.api.worker_pool.run_pool", lambda *a, **kw: pools.append((a, kw)) or 0
    )
    assert cli("db", "upgrade").code == 0
    assert cli("serve", "--workers", "2", "--port", "8124").code == 0
    assert uvicorn_calls == []  # the pool's workers start uvicorn themselves
    ((args, options),) = pools
    assert args == (2, "127.0.0.1", 8124)
    assert options["log_level"] == "info"


def test_app_factory_reads_the_environment(sqlite_url: str) -> None:
    from service.api.factory import app_from_environment

    engine = make_engine(sqlite_url)
    upgrade(engine)
    engine.dispose()
    app = app_from_environment()
    assert app.state.settings.database_url == sqlite_url
    app.state.engine.dispose()


def test_demo_without_serving(
    cli: Cli, clean_env: pytest.MonkeyPatch, tmp_path: Path, uvicorn_calls: list[Any]
) -> None:
    url = f"sqlite:///{tmp_path / 'demo.db'}"
    run = cli("demo", "--no-serve", "--database", url)
    assert run.code == 0, run.err
    assert uvicorn_calls == []
    lines = dict(line.split(":", 1) for line in run.out.splitlines() if ":" in line)
    collection = lines["collection"].strip()
    admin_key, read_key = lines["admin key"].strip(), lines["read key"].strip()

    engine = make_engine(url)
    try:
        with make_session_factory(engine)() as session:
            assert get_collection(session, collection)["documents"] >= 600
            verifier = KeyVerifier(ttl=0.0)
            assert verifier.scope_of(session, admin_key) == "admin"
            assert verifier.scope_of(session, read_key) == "read"

        # A second run reuses the collection and replaces the keys.
        again = cli("demo", "--no-serve", "--database", url)
        assert again.code == 0
        assert "0 inserted, 0 updated" in again.out
        with make_session_factory(engine)() as session:
            assert KeyVerifier(ttl=0.0).scope_of(session, admin_key) is None
    finally:
        engine.dispose()
