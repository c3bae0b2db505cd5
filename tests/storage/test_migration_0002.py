"""Revision 0002 on a database already holding documents: nothing is lost (on SQLite the
collections table is rebuilt; with foreign keys on, that would cascade into documents)."""

from __future__ import annotations

from collections.abc import Iterator
from pathlib import Path

import pytest
from sqlalchemy import Engine, text

from service.storage.schema import downgrade, upgrade
from tests.conftest import PG_URL
from tests.factories import scratch_engine


@pytest.fixture
def scratch(backend: str, tmp_path: Path) -> Iterator[Engine]:
    with scratch_engine(backend, PG_URL, tmp_path) as engine:
        yield engine


def _counts(engine: Engine) -> tuple[int, int, int]:
    with engine.connect() as conn:
        return tuple(  # type: ignore[return-value]
            conn.execute(text(f"SELECT count(*) FROM {t}")).scalar_one()
            for t in ("collections", "documents", "terms")
        )


def _populate_at_0001(engine: Engine) -> None:
    upgrade(engine, "0001")
    with engine.begin() as conn:
        conn.execute(
            text(
                "INSERT INTO collections (name, settings, created_at, updated_at, change_count) "
                "VALUES ('old', '{}', '2024-01-01', '2024-01-01', 2)"
            )
        )
        conn.execute(
            text(
                "INSERT INTO terms (collection_id, term, document_frequency) VALUES (1, 'tide', 2)"
            )
        )
        for ext in ("a", "b"):
            conn.execute(
                text(
                    "INSERT INTO documents (collection_id, external_id, title, text, metadata, "
                    "content_hash, term_counts, n_terms, created_at, updated_at) VALUES "
                    f"(1, '{ext}', '', 'tide', '{{}}', 'h{ext}', :blob, 1, '2024-01-01', "
                    "'2024-01-01')"
                ),
                {"blob": b"\x01\x01\x00\x00\x00\x00\x00"},
            )


def test_upgrade_and_downgrade_keep_stored_documents(scratch: Engine) -> None:
    _populate_at_0001(scratch)
    assert _counts(scratch) == (1, 2, 1)
    upgrade(scratch)
    assert _counts(scratch) == (1, 2, 1)
    with scratch.connect() as conn:
        row = conn.execute(
            text(
                "SELECT active_version_id, next_group_id, last_build_change_count FROM collections"
            )
        ).one()
        revisions = conn.execute(text("SELECT revision FROM documents")).scalars().all()
    assert tuple(row) == (None, 0, 0)
    assert revisions == [0, 0]
    downgrade(scratch, "0001")
    assert _counts(scratch) == (1, 2, 1)
