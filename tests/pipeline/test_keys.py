"""API keys: stored hashed, checked by scope, revocable, cached for a bounded time."""

from __future__ import annotations

import pytest
from sqlalchemy import Engine, select

from service.errors import InvalidInputError, NotFoundError
from service.pipeline.keys import (
    KeyVerifier,
    create_key,
    hash_key,
    list_keys,
    revoke_key,
    scope_allows,
)
from service.storage.models import ApiKey
from service.storage.session import make_session_factory


def test_scopes_include_the_smaller_ones() -> None:
    allowed = {(g, n) for g in ("read", "write", "admin") for n in ("read", "write", "admin")}
    granted = {(g, n) for g, n in allowed if scope_allows(g, n)}
    assert granted == {
        ("read", "read"),
        ("write", "read"),
        ("write", "write"),
        ("admin", "read"),
        ("admin", "write"),
        ("admin", "admin"),
    }


def test_only_the_hash_is_stored(engine: Engine) -> None:
    with make_session_factory(engine)() as session:
        raw, info = create_key(session, "  editor  ", "write")
        stored = session.scalars(select(ApiKey)).one()
    assert raw.startswith("tdm_") and len(raw) > 40
    assert stored.key_hash == hash_key(raw) != raw
    assert raw not in (stored.name, stored.prefix, stored.scope)
    assert raw.startswith(stored.prefix)
    assert (info.name, info.scope, info.revoked_at) == ("editor", "write", None)


def test_bad_key_requests(engine: Engine) -> None:
    with make_session_factory(engine)() as session:
        with pytest.raises(InvalidInputError):
            create_key(session, "x", "root")
        with pytest.raises(InvalidInputError):
            create_key(session, "   ", "read")
        with pytest.raises(NotFoundError):
            revoke_key(session, 12345)


def test_verifier_knows_scopes_and_forgets_revoked_keys(engine: Engine) -> None:
    factory = make_session_factory(engine)
    verifier = KeyVerifier(ttl=0)
    with factory() as session:
        raw, info = create_key(session, "reader", "read")
        assert verifier.scope_of(session, raw) == "read"
        assert verifier.scope_of(session, raw + "x") is None
        revoked = revoke_key(session, info.id)
        assert revoked.revoked_at is not None
        assert verifier.scope_of(session, raw) is None
        again = revoke_key(session, info.id)  # revoking twice keeps the first time
        assert again.revoked_at == revoked.revoked_at
        assert [k.id for k in list_keys(session)] == [info.id]


def test_verifier_cache_trusts_a_key_for_its_ttl_only(engine: Engine) -> None:
    factory = make_session_factory(engine)
    cached = KeyVerifier(ttl=3600)
    with factory() as session:
        raw, info = create_key(session, "reader", "read")
        assert cached.scope_of(session, raw) == "read"
        revoke_key(session, info.id)
        # Documented: a revoked key keeps working until the cache entry expires.
        assert cached.scope_of(session, raw) == "read"
        assert KeyVerifier(ttl=0).scope_of(session, raw) is None


def test_direct_look_up_renews_and_forgets_like_scope_of(engine: Engine) -> None:
    factory = make_session_factory(engine)
    with factory() as session:
        raw, info = create_key(session, "reader", "read")
    with pytest.raises(RuntimeError):
        KeyVerifier(ttl=0).scope_now(raw)
    direct = KeyVerifier(ttl=0, engine=engine)
    assert direct.scope_now(raw) == "read"
    assert direct.scope_now(raw + "x") is None
    remembered = KeyVerifier(ttl=3600, engine=engine)
    assert remembered.scope_now(raw) == "read"
    with factory() as session:
        revoke_key(session, info.id)
    assert direct.scope_now(raw) is None  # nothing remembered: refused at once
    assert remembered.scope_now(raw) == "read"  # remembered for its ttl, as documented
    assert remembered.cached_scope(raw) == "read"
