"""Small shared shapes of use-case answers: timestamps and validation details."""

from __future__ import annotations

from datetime import datetime
from typing import Any

from pydantic import ValidationError


def iso(value: datetime | None) -> str | None:
    return value.isoformat() if value is not None else None


def validation_details(exc: ValidationError, default_field: str = "") -> list[dict[str, Any]]:
    """Pydantic's errors as the API's ``details`` list: one field and problem each."""
    return [
        {"field": ".".join(str(p) for p in err["loc"]) or default_field, "problem": err["msg"]}
        for err in exc.errors(include_url=False, include_input=False)
    ]
