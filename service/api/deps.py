"""Request-scoped dependencies: a database session and the API-key check."""

from __future__ import annotations

from collections.abc import Callable, Iterator
from typing import Any

from fastapi import Depends, Request
from fastapi.concurrency import run_in_threadpool
from sqlalchemy.orm import Session, sessionmaker

from service.config import Settings
from service.errors import AuthenticationError, PermissionDeniedError
from service.pipeline.keys import KeyVerifier, scope_allows


def session_factory(request: Request) -> sessionmaker[Session]:
    factory: sessionmaker[Session] = request.app.state.session_factory
    return factory


def settings(request: Request) -> Settings:
    value: Settings = request.app.state.settings
    return value


def db_session(request: Request) -> Iterator[Session]:
    with session_factory(request)() as session:
        yield session


def _bearer(request: Request) -> str:
    header = request.headers.get("authorization", "")
    scheme, _, token = header.partition(" ")
    if scheme.lower() != "bearer" or not token.strip():
        raise AuthenticationError("send an API key as `Authorization: Bearer <key>`")
    return token.strip()


def _look_up(request: Request, verifier: KeyVerifier, token: str) -> str | None:
    with session_factory(request)() as session:
        return verifier.scope_of(session, token)


def require(scope: str) -> Callable[..., Any]:
    """Dependency that lets a request through only with a key of at least ``scope``."""

    async def check(request: Request) -> str:
        # Async, so a remembered key costs no thread hop; a look-up goes to a thread.
        token = _bearer(request)
        verifier: KeyVerifier = request.app.state.key_verifier
        granted = verifier.cached_scope(token)
        if granted is None:
            granted = await run_in_threadpool(_look_up, request, verifier, token)
        if granted is None:
            raise AuthenticationError("the API key is unknown or revoked")
        if not scope_allows(granted, scope):
            raise PermissionDeniedError(
                f"this key has scope {granted!r}; this operation needs {scope!r}",
                {"granted": granted, "needed": scope},
            )
        return granted

    check.__name__ = f"require_{scope}"
    return check


READ = Depends(require("read"))
WRITE = Depends(require("write"))
ADMIN = Depends(require("admin"))
