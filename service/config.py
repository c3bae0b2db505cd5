"""Settings from TIDEMAP_* environment variables, read once by the composition root.

Nothing is read at import: `load_settings()` is called by the CLI (or a test) and the
resulting frozen object is passed down explicitly.
"""

from __future__ import annotations

from typing import Literal

from pydantic import Field
from pydantic_settings import BaseSettings, SettingsConfigDict

MIB = 1024 * 1024


class Settings(BaseSettings):
    """Process-wide settings. Every field can be set as ``TIDEMAP_<FIELD>``."""

    model_config = SettingsConfigDict(env_prefix="TIDEMAP_", extra="ignore", frozen=True)

    database_url: str = Field(
        default="sqlite:///./tidemap.db",
        description="SQLAlchemy URL; postgresql+psycopg://user@host/db in production.",
    )
    host: str = "127.0.0.1"
    port: int = Field(default=8000, ge=1, le=65535)
    max_text_bytes: int = Field(
        default=1 * MIB, ge=1024, description="Largest title + text of one document (UTF-8)."
    )
    max_batch_items: int = Field(
        default=1000, ge=1, description="Most documents in one JSON-list batch request."
    )
    max_body_bytes: int = Field(
        default=64 * MIB, ge=1024, description="Largest non-streamed request body."
    )
    ndjson_chunk_size: int = Field(
        default=1000, ge=1, description="NDJSON documents committed per transaction."
    )
    auth_cache_seconds: float = Field(
        default=5.0,
        ge=0,
        description="How long a verified API key is trusted without a database look-up; "
        "a revoked key stops working within this time.",
    )
    auto_upgrade: bool = Field(
        default=False,
        description="Upgrade the schema on start instead of refusing a database that is behind.",
    )
    log_level: str = "info"
    # --- index builds and workers ---
    embedded_worker: Literal["auto", "on", "off"] = Field(
        default="auto",
        description="Run a build worker thread inside `tidemap serve`: auto = only with "
        "SQLite (one process is then a whole service), on = always, off = never.",
    )
    keep_versions: int = Field(
        default=3,
        ge=1,
        le=100,
        description="Index versions kept per collection (the active one included); older "
        "ones are deleted after a newer version is published.",
    )
    worker_lease_seconds: float = Field(
        default=60.0,
        ge=1.0,
        description="How long a claimed job stays a worker's without a heartbeat; a killed "
        "worker's job is retried by another after this.",
    )
    worker_poll_seconds: float = Field(
        default=2.0, gt=0.0, description="How often an idle worker looks for jobs."
    )
    build_max_attempts: int = Field(
        default=3, ge=1, le=100, description="Attempts of a build before it is failed."
    )
    build_retry_seconds: float = Field(
        default=10.0,
        ge=0.0,
        description="Back-off before the first retry of a build; doubled for each further "
        "attempt (at most 10 minutes).",
    )
    preload_indexes: bool = Field(
        default=True,
        description="Load every collection's active index when an API process starts, "
        "before it takes connections, so no first query waits for the load.",
    )
    version_check_seconds: float = Field(
        default=2.0,
        ge=0.0,
        description="How often an API process checks whether a newer index version has "
        "been published (one cheap SELECT).",
    )


def load_settings(**overrides: object) -> Settings:
    """Read the environment now and return the settings, with explicit overrides on top."""
    return Settings(**overrides)  # type: ignore[arg-type]
