from __future__ import annotations

import json

import pytest
from sqlalchemy import Engine

from service.pipeline.keys import KeyVerifier
from service.storage.schema import schema_status
from service.storage.session import make_engine, make_session_factory
from tests.cli.conftest import Cli


def _scope(engine: Engine, raw: str) -> str | None:
    with make_session_factory(engine)() as session:
        return KeyVerifier(ttl=0.0).scope_of(session, raw)


def test_no_command_prints_help(cli: Cli) -> None:
    run = cli()
    assert run.code == 2
    assert "usage: tidemap" in run.out


def test_db_status_then_upgrade(cli: Cli, sqlite_url: str) -> None:
    before = cli("db", "status")
    assert before.code == 0
    assert "state:    behind" in before.out
    assert "tidemap db upgrade" in before.err
    assert cli("db", "status", "--check").code == 1

    upgraded = cli("db", "upgrade")
    assert upgraded.code == 0
    engine = make_engine(sqlite_url)
    status = schema_status(engine)
    engine.dispose()
    assert status.ok
    assert f"-> {status.head}" in upgraded.out

    after = cli("db", "status", "--check")
    assert after.code == 0
    assert f"current:  {status.head}" in after.out
    assert "state:    current" in after.out


def test_keys_create_list_revoke(cli: Cli, sqlite_url: str) -> None:
    created = cli("keys", "create", "--name", "newsroom app", "--scope", "write")
    assert created.code == 0
    raw = created.out.strip()
    assert "\n" not in raw  # the key alone on stdout
    assert "not stored" in created.err
    assert "cannot be shown again" in created.err

    engine = make_engine(sqlite_url)
    try:
        assert _scope(engine, raw) == "write"

        listed = cli("keys", "list")
        assert listed.code == 0
        header, row = listed.out.strip().splitlines()
        assert header.split() == ["id", "name", "prefix", "scope", "created", "revoked"]
        assert "newsroom app" in row
        assert raw[:12] in row
        assert raw not in listed.out
        key_id = row.split()[0]

        revoked = cli("keys", "revoke", key_id)
        assert revoked.code == 0
        assert "revoked" in revoked.out
        assert _scope(engine, raw) is None
        assert cli("keys", "list").out.strip().splitlines()[1].split()[-1] != "-"
    finally:
        engine.dispose()


def test_keys_revoke_unknown_id(cli: Cli, sqlite_url: str) -> None:
    run = cli("keys", "revoke", "999")
    assert run.code == 1
    assert "999" in run.err


def test_keys_bad_scope_is_a_usage_error(cli: Cli, sqlite_url: str) -> None:
    with pytest.raises(SystemExit) as raised:  # argparse rejects it before any database work
        cli("keys", "create", "--name", "x", "--scope", "owner")
    assert raised.value.code == 2


def test_collections_create_with_settings_and_list(cli: Cli, sqlite_url: str) -> None:
    created = cli(
        "collections",
        "create",
        "news",
        "--setting",
        "stemming=true",
        "--setting",
        "reindex.after_changes=250",
        "--setting",
        "language=german",
    )
    assert created.code == 0, created.err
    view = json.loads(created.out)
    assert view["settings"]["stemming"] is True
    assert view["settings"]["language"] == "german"
    assert view["settings"]["reindex"]["after_changes"] == 250

    again = cli("collections", "create", "news")
    assert again.code == 1
    assert "already exists" in again.err

    bad = cli("collections", "create", "other", "--setting", "neighbors=1")
    assert bad.code == 1

    listed = cli("collections", "list")
    assert listed.out.splitlines()[0].split()[:2] == ["name", "documents"]
    assert listed.out.splitlines()[1].split()[0] == "news"
    assert len(listed.out.strip().splitlines()) == 2
