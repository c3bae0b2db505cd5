"""The domain error tree. Layers below the API raise these; the API maps each class to an
HTTP status in one table (service/api/errors.py)."""

from __future__ import annotations

from typing import Any, ClassVar


class TidemapError(Exception):
    """Base of every error the service reports to a caller."""

    code: ClassVar[str] = "error"

    def __init__(self, message: str, details: Any = None, *, code: str | None = None) -> None:
        super().__init__(message)
        self.message = message
        self.details = details
        if code is not None:
            self.code = code  # type: ignore[misc]

    def to_dict(self) -> dict[str, Any]:
        return {"code": self.code, "message": self.message, "details": self.details}


class InvalidInputError(TidemapError):
    """The request is well-formed but its content is not acceptable."""

    code = "invalid_input"


class MalformedRequestError(TidemapError):
    """The request body cannot be parsed at all (bad JSON, bad encoding, bad cursor)."""

    code = "malformed_request"


class PayloadTooLargeError(TidemapError):
    """A text, a body or a batch exceeds a documented limit."""

    code = "payload_too_large"


class NotFoundError(TidemapError):
    code = "not_found"


class ConflictError(TidemapError):
    """The request clashes with the current state (duplicate name, settings locked...)."""

    code = "conflict"


class AuthenticationError(TidemapError):
    """No API key, or one that is unknown or revoked."""

    code = "unauthenticated"


class PermissionDeniedError(TidemapError):
    """The key is valid but its scope is too small."""

    code = "forbidden"


class SchemaMismatchError(TidemapError):
    """The database schema is behind or ahead of this version of the code."""

    code = "schema_mismatch"


class UnavailableError(TidemapError):
    """A dependency (the database) cannot be reached right now."""

    code = "unavailable"


class BuildFailedError(TidemapError):
    """A build cannot succeed with the collection as it is (too few documents, none with
    terms, settings the geometry refuses): retrying would not help, so it fails at once."""

    code = "build_failed"
