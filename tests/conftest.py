"""Database fixtures: every database test runs on SQLite and, where
TIDEMAP_TEST_POSTGRES_URL is set, on PostgreSQL too (the same test, parametrised).

With TIDEMAP_REQUIRE_POSTGRES=1 (CI sets it) a missing PostgreSQL URL is an error, so the
PostgreSQL half of the suite can never be skipped silently.
"""

from __future__ import annotations

import os
import shutil
from collections.abc import Iterator
from pathlib import Path

import pytest
from sqlalchemy import Engine, text

from service.storage.models import Base
from service.storage.schema import upgrade
from service.storage.session import make_engine

PG_URL = os.environ.get("TIDEMAP_TEST_POSTGRES_URL", "").strip()
BACKENDS = ["sqlite", "postgres"] if PG_URL else ["sqlite"]


def pytest_configure(config: pytest.Config) -> None:
    if os.environ.get("TIDEMAP_REQUIRE_POSTGRES") == "1" and not PG_URL:
        raise pytest.UsageError(
            "TIDEMAP_REQUIRE_POSTGRES=1 but TIDEMAP_TEST_POSTGRES_URL is not set"
        )


@pytest.fixture(scope="session")
def sqlite_template(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """A migrated SQLite file, copied for each test (faster than migrating each time)."""
    path = tmp_path_factory.mktemp("template") / "template.db"
    engine = make_engine(f"sqlite:///{path}")
    upgrade(engine)
    with engine.connect() as conn:
        conn.execute(text("PRAGMA wal_checkpoint(TRUNCATE)"))
    engine.dispose()
    return path


@pytest.fixture(scope="session")
def postgres_engine() -> Iterator[Engine]:
    if not PG_URL:
        pytest.skip("TIDEMAP_TEST_POSTGRES_URL is not set")
    engine = make_engine(PG_URL)
    with engine.begin() as conn:
        conn.execute(text("DROP SCHEMA public CASCADE"))
        conn.execute(text("CREATE SCHEMA public"))
    upgrade(engine)
    yield engine
    engine.dispose()


def _truncate_postgres(engine: Engine) -> None:
    names = ", ".join(t.name for t in Base.metadata.sorted_tables)
    with engine.begin() as conn:
        conn.execute(text(f"TRUNCATE {names} RESTART IDENTITY CASCADE"))


@pytest.fixture(params=BACKENDS)
def backend(request: pytest.FixtureRequest) -> str:
    return str(request.param)


@pytest.fixture
def database_url(backend: str, request: pytest.FixtureRequest, tmp_path: Path) -> str:
    """A fresh, migrated, empty database of the test's back end."""
    if backend == "postgres":
        engine: Engine = request.getfixturevalue("postgres_engine")
        _truncate_postgres(engine)
        return PG_URL
    template: Path = request.getfixturevalue("sqlite_template")
    target = tmp_path / "tidemap.db"
    shutil.copyfile(template, target)
    return f"sqlite:///{target}"


@pytest.fixture
def engine(database_url: str) -> Iterator[Engine]:
    eng = make_engine(database_url)
    yield eng
    eng.dispose()
