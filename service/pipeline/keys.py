"""API keys: created once and shown once, stored as a SHA-256 hash, checked per request."""

from __future__ import annotations

import hashlib
import secrets
import threading
import time
from dataclasses import dataclass
from typing import Any

from sqlalchemy import Engine, bindparam, select
from sqlalchemy.orm import Session

from service.errors import InvalidInputError, NotFoundError
from service.storage.models import ApiKey
from service.storage.prepared_read import PreparedRead
from service.storage.types import utcnow

SCOPES = ("read", "write", "admin")  # each includes the ones before it
KEY_PREFIX = "tdm_"


def scope_allows(granted: str, needed: str) -> bool:
    return SCOPES.index(granted) >= SCOPES.index(needed)


def hash_key(raw: str) -> str:
    return hashlib.sha256(raw.encode("utf-8")).hexdigest()


@dataclass(frozen=True)
class KeyInfo:
    id: int
    name: str
    scope: str
    prefix: str
    created_at: str
    revoked_at: str | None

    def to_dict(self) -> dict[str, Any]:
        return self.__dict__.copy()


def _info(key: ApiKey) -> KeyInfo:
    return KeyInfo(
        id=key.id,
        name=key.name,
        scope=key.scope,
        prefix=key.prefix,
        created_at=key.created_at.isoformat(),
        revoked_at=key.revoked_at.isoformat() if key.revoked_at else None,
    )


def create_key(session: Session, name: str, scope: str) -> tuple[str, KeyInfo]:
    """Create a key; the raw key is returned once and never stored."""
    if scope not in SCOPES:
        raise InvalidInputError(f"scope {scope!r} is not one of {', '.join(SCOPES)}")
    if not name.strip() or len(name) > 100:
        raise InvalidInputError("a key needs a name of 1-100 characters")
    raw = KEY_PREFIX + secrets.token_urlsafe(32)
    key = ApiKey(
        name=name.strip(),
        key_hash=hash_key(raw),
        prefix=raw[:12],
        scope=scope,
        created_at=utcnow(),
    )
    session.add(key)
    session.commit()
    return raw, _info(key)


def list_keys(session: Session) -> list[KeyInfo]:
    return [_info(k) for k in session.scalars(select(ApiKey).order_by(ApiKey.id))]


def revoke_key(session: Session, key_id: int) -> KeyInfo:
    key = session.get(ApiKey, key_id)
    if key is None:
        raise NotFoundError(f"there is no API key with id {key_id}")
    if key.revoked_at is None:
        key.revoked_at = utcnow()
        session.commit()
    return _info(key)


class KeyVerifier:
    """Checks a presented key, remembering good answers for ``ttl`` seconds so a busy
    query path does not hit the database on every request.

    With an ``engine``, ``scope_now`` looks a key up itself with one raw indexed read
    (service.storage.prepared_read): the query fast path uses it, so an expired entry is
    renewed by the first request that meets it instead of sending every request in flight
    to the slower route path at once (at 32 connections that burst was the p99 of related
    documents, once per ``ttl``)."""

    def __init__(self, ttl: float, engine: Engine | None = None) -> None:
        self._ttl = ttl
        self._cache: dict[str, tuple[float, str]] = {}
        self._lock = threading.Lock()
        self._read = (
            None
            if engine is None
            else PreparedRead(
                engine,
                select(ApiKey.scope).where(
                    ApiKey.key_hash == bindparam("digest"), ApiKey.revoked_at.is_(None)
                ),
            )
        )

    def cached_scope(self, raw: str) -> str | None:
        """The scope remembered for this key if it was verified less than ``ttl`` ago."""
        with self._lock:
            hit = self._cache.get(hash_key(raw))
        if hit is not None and time.monotonic() - hit[0] < self._ttl:
            return hit[1]
        return None

    def scope_of(self, session: Session, raw: str) -> str | None:
        cached = self.cached_scope(raw)
        if cached is not None:
            return cached
        digest = hash_key(raw)
        now = time.monotonic()
        scope = session.scalars(
            select(ApiKey.scope).where(ApiKey.key_hash == digest, ApiKey.revoked_at.is_(None))
        ).first()
        return self._remember(digest, now, scope)

    def scope_now(self, raw: str) -> str | None:
        """Like ``scope_of``, with the verifier's own engine (blocking: one indexed read).
        Driver errors propagate as the driver raises them."""
        if self._read is None:
            raise RuntimeError("this KeyVerifier was made without an engine")
        cached = self.cached_scope(raw)
        if cached is not None:
            return cached
        digest = hash_key(raw)
        now = time.monotonic()  # before the read: the answer is at least this fresh
        found = self._read.first(digest=digest)
        return self._remember(digest, now, None if found is None else str(found[0]))

    def _remember(self, digest: str, verified_at: float, scope: str | None) -> str | None:
        with self._lock:
            if scope is None:
                self._cache.pop(digest, None)
            else:
                if len(self._cache) > 10_000:
                    self._cache.clear()
                self._cache[digest] = (verified_at, scope)
        return scope
