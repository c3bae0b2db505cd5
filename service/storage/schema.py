"""Schema version checks and upgrades through Alembic, configured in code."""

from __future__ import annotations

import importlib.util
from dataclasses import dataclass
from pathlib import Path

from alembic import command
from alembic.config import Config
from alembic.runtime.migration import MigrationContext
from alembic.script import ScriptDirectory
from sqlalchemy import Engine

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


def upgrade(engine: Engine, revision: str = "head") -> None:
    config = alembic_config()
    with engine.begin() as conn:
        config.attributes["connection"] = conn
        command.upgrade(config, revision)


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
