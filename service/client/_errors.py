"""What the client raises. Every error the service answers becomes a `TidemapApiError`
of the class of its status family; nothing is swallowed.

```
TidemapClientError              anything this package raises itself
├── TidemapApiError             the service answered an error: status, code, message, details
│   ├── MalformedRequestError   400: bad JSON, bad cursor
│   ├── AuthError               401: no key, or an unknown or revoked one
│   │   └── PermissionDeniedError  403: the key's scope is too small
│   ├── NotFoundError           404: unknown collection, document, build, group, route
│   ├── ConflictError           409: duplicate name, locked settings, no index yet
│   ├── PayloadTooLargeError    413: a text, body or batch over the service's limits
│   ├── InvalidInputError       422: fields out of range, a document without terms
│   └── ServerError             5xx
│       └── UnavailableError    503: database unreachable, schema not current
├── ResponseShapeError          a 2xx answer that is not the JSON this client expects
├── BuildFailedError            wait_for_build: the build failed or was cancelled
└── BuildTimeoutError           wait_for_build: not finished in time (also a TimeoutError)
```

Transport failures (connection refused, time-outs) are httpx's own exceptions.
"""

from __future__ import annotations

import json
from typing import TYPE_CHECKING, Any

import httpx

if TYPE_CHECKING:
    from service.client._models import BuildStatus


class TidemapClientError(Exception):
    """Base of every error this client raises itself."""


class TidemapApiError(TidemapClientError):
    """The service answered ``{"error": {"code", "message", "details"}}`` with ``status``."""

    def __init__(self, status: int, code: str, message: str, details: Any = None) -> None:
        super().__init__(f"{status} {code}: {message}")
        self.status = status
        self.code = code
        self.message = message
        self.details = details

    def __repr__(self) -> str:
        name = type(self).__name__
        return f"{name}(status={self.status}, code={self.code!r}, message={self.message!r})"


class MalformedRequestError(TidemapApiError):
    """400."""


class AuthError(TidemapApiError):
    """401 (and, through `PermissionDeniedError`, 403)."""


class PermissionDeniedError(AuthError):
    """403: the key is valid but its scope is too small; ``details`` has granted/needed."""


class NotFoundError(TidemapApiError):
    """404."""


class ConflictError(TidemapApiError):
    """409; ``code == "no_index"`` before a collection's first build is published."""


class PayloadTooLargeError(TidemapApiError):
    """413."""


class InvalidInputError(TidemapApiError):
    """422."""


class ServerError(TidemapApiError):
    """5xx."""


class UnavailableError(ServerError):
    """503: try again shortly."""


class ResponseShapeError(TidemapClientError):
    """A successful answer this client cannot read (another service, or a newer one that
    changed a shape); ``body`` holds the first characters of what came back."""

    def __init__(self, message: str, body: str = "") -> None:
        super().__init__(message)
        self.body = body


class BuildFailedError(TidemapClientError):
    """The build ended ``failed`` or ``cancelled``; ``build`` is its last status."""

    def __init__(self, build: BuildStatus) -> None:
        super().__init__(f"build {build.id} of {build.collection!r} {build.state}: {build.error}")
        self.build = build


class BuildTimeoutError(TidemapClientError, TimeoutError):
    """The build had not finished when the wait ran out; ``build`` is its last status."""

    def __init__(self, build: BuildStatus, waited: float) -> None:
        super().__init__(
            f"build {build.id} of {build.collection!r} still {build.state} "
            f"(stage {build.stage}) after {waited:.1f} s"
        )
        self.build = build
        self.waited = waited


_BY_STATUS: dict[int, type[TidemapApiError]] = {
    400: MalformedRequestError,
    401: AuthError,
    403: PermissionDeniedError,
    404: NotFoundError,
    409: ConflictError,
    413: PayloadTooLargeError,
    422: InvalidInputError,
    503: UnavailableError,
}


def error_class(status: int) -> type[TidemapApiError]:
    if status in _BY_STATUS:
        return _BY_STATUS[status]
    return ServerError if status >= 500 else TidemapApiError


def api_error(response: httpx.Response) -> TidemapApiError:
    """The error of a non-2xx answer. A body that is not the service's error shape (a proxy's
    HTML page, say) still gives an error: code ``http_<status>`` and the body's start."""
    status = response.status_code
    try:
        body = response.json()
        error = body["error"]
        code, message = str(error["code"]), str(error["message"])
        details = error.get("details")
    except (ValueError, KeyError, TypeError):
        text = response.text.strip()[:500]
        code, message, details = f"http_{status}", text or response.reason_phrase, None
    return error_class(status)(status, code, message, details)


def shape_error(response: httpx.Response, problem: Exception) -> ResponseShapeError:
    where = f"{response.request.method} {response.request.url.path}"
    if isinstance(problem, json.JSONDecodeError):
        reason = "the answer is not JSON"
    else:
        reason = f"unexpected answer shape ({type(problem).__name__}: {problem})"
    return ResponseShapeError(f"{where}: {reason}", response.text[:500])
