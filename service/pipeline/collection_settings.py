"""A collection's settings: validated, with documented defaults, unknown keys rejected."""

from __future__ import annotations

from typing import Any, Literal

from pydantic import BaseModel, ConfigDict, Field, ValidationError, model_validator

from service.errors import InvalidInputError
from service.pipeline.formatting import validation_details
from service.text.tokenize import supported_languages


class ReindexPolicy(BaseModel):
    """When the worker rebuilds a collection's index on its own: every N seconds and/or
    after M changed documents, whichever comes first. Both unset: only on request."""

    model_config = ConfigDict(extra="forbid", frozen=True)

    every_seconds: int | None = Field(default=None, ge=60, le=31 * 24 * 3600)
    after_changes: int | None = Field(default=None, ge=1, le=10_000_000)


class CollectionSettings(BaseModel):
    """Settings of one collection. Every field has a default; see README "Settings"."""

    model_config = ConfigDict(extra="forbid", frozen=True)

    language: str = Field(default="english", description="Stop words and stemmer.")
    stemming: bool = Field(default=False, description="Snowball stemming of terms.")
    vocab_size: int = Field(default=50_000, ge=100, le=1_000_000)
    min_df: int = Field(default=2, ge=1, le=1_000_000, description="Least documents per term.")
    max_df: float = Field(default=0.5, gt=0.0, le=1.0, description="Largest document share.")
    neighbors: int = Field(default=15, ge=2, le=200, description="k of the k-NN graph.")
    alpha: float = Field(default=1.0, ge=0.0, le=1.0, description="Density normalisation.")
    diffusion_time: float = Field(default=1.0, gt=0.0, le=1000.0, description="t.")
    max_coordinates: int = Field(default=40, ge=2, le=500)
    groups: int | Literal["auto"] = Field(default="auto", description="Number of groups.")
    reindex: ReindexPolicy = Field(default_factory=ReindexPolicy)

    @model_validator(mode="after")
    def _check(self) -> CollectionSettings:
        if self.language not in supported_languages():
            raise ValueError(
                f"language {self.language!r} is not supported; choose one of "
                f"{', '.join(supported_languages())}"
            )
        if isinstance(self.groups, int) and not 2 <= self.groups <= 500:
            raise ValueError(f"groups must be 'auto' or between 2 and 500, not {self.groups}")
        return self


# Settings that change how text becomes terms: locked once documents are stored.
TOKENISATION_FIELDS = frozenset({"language", "stemming"})


def parse_settings(raw: Any) -> CollectionSettings:
    """Validate a settings object from a request; raise InvalidInputError with details."""
    if raw is None:
        return CollectionSettings()
    if not isinstance(raw, dict):
        raise InvalidInputError("settings must be a JSON object")
    try:
        return CollectionSettings.model_validate(raw)
    except ValidationError as exc:
        raise InvalidInputError(
            "invalid collection settings", validation_details(exc, "settings")
        ) from exc


def merge_settings(current: CollectionSettings, patch: Any) -> CollectionSettings:
    """Apply a partial settings object (nested for ``reindex``) and validate the result."""
    if not isinstance(patch, dict):
        raise InvalidInputError("settings must be a JSON object")
    merged = current.model_dump()
    for key, value in patch.items():
        if key == "reindex" and isinstance(value, dict) and isinstance(merged.get(key), dict):
            merged[key] = {**merged[key], **value}
        else:
            merged[key] = value
    return parse_settings(merged)
