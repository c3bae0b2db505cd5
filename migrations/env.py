"""Alembic environment: runs revisions against the engine handed over in
``config.attributes["connection"]`` (service code) or TIDEMAP_DATABASE_URL (developers)."""

from __future__ import annotations

import os

from alembic import context
from sqlalchemy import Connection

from service.storage.models import Base
from service.storage.session import make_engine

target_metadata = Base.metadata


def _run(connection: Connection) -> None:
    context.configure(
        connection=connection,
        target_metadata=target_metadata,
        # SQLite cannot ALTER most things in place; batch mode rebuilds the table.
        render_as_batch=connection.dialect.name == "sqlite",
        compare_type=True,
    )
    with context.begin_transaction():
        context.run_migrations()


connection = context.config.attributes.get("connection")
if connection is not None:
    _run(connection)
else:
    url = os.environ.get("TIDEMAP_DATABASE_URL", "sqlite:///./tidemap.db")
    engine = make_engine(url)
    with engine.connect() as conn:
        _run(conn)
    engine.dispose()
