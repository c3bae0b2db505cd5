"""The models and the migrations agree, and the migrations run up, down and up again."""

from __future__ import annotations

from collections.abc import Iterator
from pathlib import Path

import pytest
from alembic.autogenerate import compare_metadata
from alembic.runtime.migration import MigrationContext
from sqlalchemy import Engine, inspect, text

from service.pipeline import collections, documents
from service.storage.models import Base
from service.storage.schema import schema_status, upgrade
from service.storage.session import make_session_factory
from tests.conftest import PG_URL
from tests.factories import downgrade, frequency_recount, scratch_engine

TABLES = {t.name for t in Base.metadata.sorted_tables}


@pytest.fixture
def scratch(backend: str, tmp_path: Path) -> Iterator[Engine]:
    with scratch_engine(backend, PG_URL, tmp_path) as engine:
        yield engine


def differences(engine: Engine) -> list[object]:
    with engine.connect() as conn:
        context = MigrationContext.configure(conn, opts={"compare_type": True})
        return list(compare_metadata(context, Base.metadata))


def tables(engine: Engine) -> set[str]:
    return set(inspect(engine).get_table_names())


def test_migrated_database_matches_the_models(scratch: Engine) -> None:
    upgrade(scratch)
    assert differences(scratch) == []
    assert tables(scratch) == TABLES | {"alembic_version"}


def test_an_empty_database_differs_from_the_models(scratch: Engine) -> None:
    """The comparison is not vacuous: before the migrations it sees every table missing."""
    missing = {diff[1].name for diff in differences(scratch) if diff[0] == "add_table"}
    assert missing == TABLES


def test_upgrade_downgrade_upgrade(scratch: Engine) -> None:
    upgrade(scratch)
    head = schema_status(scratch).head
    downgrade(scratch, "base")
    assert tables(scratch) <= {"alembic_version"}
    assert schema_status(scratch).current is None
    upgrade(scratch)
    assert schema_status(scratch).current == head
    assert differences(scratch) == []
    # The re-created schema works: store documents and read the term table back.
    factory = make_session_factory(scratch)
    with factory() as session:
        collections.create_collection(session, "again")
        summary = documents.upsert_batch(
            session,
            "again",
            enumerate([{"id": "a", "text": "Harbour tide."}, {"id": "b", "text": "Tide."}]),
            max_text_bytes=10_000,
            chunk_size=10,
        )
    assert summary.inserted == 2
    table, recount = frequency_recount(scratch, "again")
    assert table == recount == {"harbour": 1, "tide": 2}


def test_upgrade_twice_is_a_no_op(scratch: Engine) -> None:
    upgrade(scratch)
    upgrade(scratch)
    with scratch.connect() as conn:
        assert conn.execute(text("SELECT count(*) FROM alembic_version")).scalar_one() == 1
