"""Schema version checks and upgrades through Alembic, configured in code."""

from __future__ import annotations

import importlib.util
from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path

from alembic import command
from alembic.config import Config
from alembic.runtime.migration import MigrationContext
from alembic.script import ScriptDirectory
from sqlalchemy import Connection, Engine

from service.errors import SchemaMismatchError


def _migrations_dir() -> Path:
    spec = importlib.util.find_spec("migrations")
    if spec is None or spec.origin is None:
        raise RuntimeError("the migrations package is not installed beside service/")
    return Path(spec.origin).parent


def alembic_config() -> Config:
    config = Config()
    config.set_main_option("script_location", str(_migrations_dir()))
    return config


@dataclass(frozen=True)
class SchemaStatus:
    current: str | None
    head: str
    state: str  # "current", "behind" (includes empty) or "ahead"

    @property
    def ok(self) -> bool:
        return self.state == "current"


def schema_status(engine: Engine) -> SchemaStatus:
    script = ScriptDirectory.from_config(alembic_config())
    head = script.get_current_head()
    assert head is not None, "no migration revisions found"
    with engine.connect() as conn:
        current = MigrationContext.configure(conn).get_current_revision()
    if current == head:
        state = "current"
    elif current is None:
        state = "behind"
    else:
        known = {rev.revision for rev in script.walk_revisions()}
        state = "behind" if current in known else "ahead"
    return SchemaStatus(current=current, head=head, state=state)


@contextmanager
def _migration_connection(engine: Engine) -> Iterator[Connection]:
    """A connection in one transaction for Alembic.

    SQLite: foreign keys are switched off around the migration (outside the transaction,
    the only place SQLite honours the pragma). Batch mode rebuilds a table by copying it
    and dropping the old one, and with foreign keys on, dropping a referenced table would
    cascade into the tables that reference it (collections -> documents, terms). The
    rebuilt schema is checked with ``PRAGMA foreign_key_check`` before the commit.
    """
    sqlite = engine.dialect.name == "sqlite"
    with engine.connect() as conn:
        raw = conn.connection.dbapi_connection
        assert raw is not None
        if sqlite:
            raw.execute("PRAGMA foreign_keys=OFF")
        try:
            with conn.begin():
                yield conn
                if sqlite:
                    broken = conn.exec_driver_sql("PRAGMA foreign_key_check").fetchall()
                    if broken:
                        raise RuntimeError(f"the migration broke foreign keys: {broken[:5]}")
        finally:
            if sqlite:
                raw.execute("PRAGMA foreign_keys=ON")


def upgrade(engine: Engine, revision: str = "head") -> None:
    config = alembic_config()
    with _migration_connection(engine) as conn:
        config.attributes["connection"] = conn
        command.upgrade(config, revision)


def downgrade(engine: Engine, revision: str) -> None:
    """Run the migrations down to ``revision`` ("base": nothing left)."""
    config = alembic_config()
    with _migration_connection(engine) as conn:
        config.attributes["connection"] = conn
        command.downgrade(config, revision)


def require_current(engine: Engine) -> None:
    """Raise a SchemaMismatchError that says what to run unless the schema is current."""
    status = schema_status(engine)
    if status.state == "behind":
        raise SchemaMismatchError(
            f"the database schema is at {status.current or 'nothing'}, this Tidemap needs "
            f"{status.head}: run `tidemap db upgrade`",
            details={"current": status.current, "head": status.head},
        )
    if status.state == "ahead":
        raise SchemaMismatchError(
            f"the database schema {status.current} is newer than this Tidemap knows "
            f"(head {status.head}): install the newer Tidemap that migrated it",
            details={"current": status.current, "head": status.head},
        )
