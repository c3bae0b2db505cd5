"""Settings from TIDEMAP_* environment variables, read once by the composition root.

Nothing is read at import: `load_settings()` is called by the CLI (or a test) and the
resulting frozen object is passed down explicitly.
"""

from __future__ import annotations

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
        default=500, ge=1, description="NDJSON documents committed per transaction."
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


def load_settings(**overrides: object) -> Settings:
    """Read the environment now and return the settings, with explicit overrides on top."""
    return Settings(**overrides)  # type: ignore[arg-type]
