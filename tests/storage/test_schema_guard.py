"""create_app refuses a database whose schema is behind or ahead of the code, saying what
to do; /readyz turns 503 when the schema changes under a running app."""

from __future__ import annotations

from collections.abc import Iterator
from pathlib import Path

import pytest
from sqlalchemy import Engine, text

from service.api.app import create_app
from service.config import Settings
from service.errors import SchemaMismatchError
from service.storage.schema import schema_status, upgrade
from tests.conftest import PG_URL
from tests.factories import auth, downgrade, make_client, make_keys, scratch_engine


@pytest.fixture
def scratch(backend: str, tmp_path: Path) -> Iterator[Engine]:
    """An empty database of the test's back end that only this test uses."""
    with scratch_engine(backend, PG_URL, tmp_path) as engine:
        yield engine


def settings_for(engine: Engine) -> Settings:
    return Settings(database_url=str(engine.url))


def refusal(engine: Engine) -> SchemaMismatchError:
    with pytest.raises(SchemaMismatchError) as caught:
        create_app(settings_for(engine), engine=engine)
    return caught.value


def test_refuses_an_empty_database(scratch: Engine) -> None:
    error = refusal(scratch)
    assert "tidemap db upgrade" in error.message
    assert error.details == {"current": None, "head": schema_status(scratch).head}


def test_refuses_a_database_without_its_version_row(scratch: Engine) -> None:
    upgrade(scratch)
    with scratch.begin() as conn:
        conn.execute(text("DELETE FROM alembic_version"))
    assert "tidemap db upgrade" in refusal(scratch).message


def test_refuses_a_database_without_its_version_table(scratch: Engine) -> None:
    upgrade(scratch)
    with scratch.begin() as conn:
        conn.execute(text("DROP TABLE alembic_version"))
    assert "tidemap db upgrade" in refusal(scratch).message


def test_refuses_a_database_downgraded_to_nothing(scratch: Engine) -> None:
    upgrade(scratch)
    downgrade(scratch, "base")
    assert schema_status(scratch).state == "behind"
    assert "tidemap db upgrade" in refusal(scratch).message


def test_refuses_a_database_ahead_of_the_code(scratch: Engine) -> None:
    upgrade(scratch)
    with scratch.begin() as conn:
        conn.execute(text("UPDATE alembic_version SET version_num = 'f00dfacade99'"))
    error = refusal(scratch)
    assert "newer than this Tidemap knows" in error.message
    assert "f00dfacade99" in error.message
    assert "tidemap db upgrade" not in error.message
    assert error.details["current"] == "f00dfacade99"


def test_accepts_a_current_database_and_turns_unready_when_it_falls_behind(
    scratch: Engine,
) -> None:
    upgrade(scratch)
    assert schema_status(scratch).ok
    keys = make_keys(scratch)
    with make_client(scratch, str(scratch.url)) as client:
        assert client.get("/readyz", headers=auth(keys["read"])).status_code == 200
        with scratch.begin() as conn:
            conn.execute(text("DELETE FROM alembic_version"))
        response = client.get("/readyz", headers=auth(keys["read"]))
        assert response.status_code == 503
        assert response.json()["schema"]["state"] == "behind"
        assert client.get("/healthz").status_code == 200  # alive, only not ready
