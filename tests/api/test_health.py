"""Liveness and readiness over HTTP."""

from __future__ import annotations

from sqlalchemy import Engine, text

from service.storage.schema import schema_status
from tests.factories import TestClient, auth


def test_healthz_answers_without_a_key(client: TestClient) -> None:
    assert client.get("/healthz").json() == {"status": "ok"}


def test_readyz_with_a_current_schema(
    client: TestClient, keys: dict[str, str], engine: Engine
) -> None:
    response = client.get("/readyz", headers=auth(keys["read"]))
    assert response.status_code == 200, response.text
    head = schema_status(engine).head
    assert response.json() == {
        "status": "ok",
        "database": "ok",
        "schema": {"current": head, "head": head, "state": "current"},
    }


def test_readyz_is_503_when_the_schema_falls_behind(
    client: TestClient, keys: dict[str, str], engine: Engine
) -> None:
    """The app started on a current schema; then the version row goes (as after a restore
    of an older backup). The shared PostgreSQL test database gets its row back."""
    with engine.begin() as conn:
        version = conn.execute(text("SELECT version_num FROM alembic_version")).scalar_one()
        conn.execute(text("DELETE FROM alembic_version"))
    try:
        response = client.get("/readyz", headers=auth(keys["read"]))
        assert response.status_code == 503, response.text
        body = response.json()
        assert body["status"] == "unavailable"
        assert body["schema"]["state"] == "behind"
        assert body["schema"]["current"] is None
    finally:
        with engine.begin() as conn:
            conn.execute(text("INSERT INTO alembic_version VALUES (:v)"), {"v": version})


def test_readyz_is_503_when_the_schema_is_ahead(
    client: TestClient, keys: dict[str, str], engine: Engine
) -> None:
    with engine.begin() as conn:
        version = conn.execute(text("SELECT version_num FROM alembic_version")).scalar_one()
        conn.execute(text("UPDATE alembic_version SET version_num = 'f00dfacade99'"))
    try:
        response = client.get("/readyz", headers=auth(keys["read"]))
        assert response.status_code == 503, response.text
        assert response.json()["schema"] == {
            "current": "f00dfacade99",
            "head": version,
            "state": "ahead",
        }
    finally:
        with engine.begin() as conn:
            conn.execute(text("UPDATE alembic_version SET version_num = :v"), {"v": version})
