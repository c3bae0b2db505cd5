"""Use cases for collections: create, list, read, change settings, delete."""

from __future__ import annotations

import re
from typing import Any

from sqlalchemy import func, select
from sqlalchemy.exc import IntegrityError
from sqlalchemy.orm import Session

from service.errors import ConflictError, InvalidInputError, NotFoundError
from service.pipeline.collection_settings import (
    TOKENISATION_FIELDS,
    CollectionSettings,
    merge_settings,
    parse_settings,
)
from service.storage import repository as repo
from service.storage.models import Collection, Term
from service.storage.types import utcnow

NAME_PATTERN = re.compile(r"^[a-z0-9][a-z0-9_-]{0,63}$")


def check_name(name: Any) -> str:
    # fullmatch: with match, `$` would also accept a trailing newline.
    if not isinstance(name, str) or not NAME_PATTERN.fullmatch(name):
        shown = name[:80] if isinstance(name, str) else name
        raise InvalidInputError(
            f"collection name {shown!r} must be 1-64 characters of a-z, 0-9, _ and -, "
            "starting with a letter or digit",
            {"field": "name"},
        )
    return name


def _view(session: Session, coll: Collection) -> dict[str, Any]:
    conn = session.connection()
    total, empty = repo.document_counts(conn, coll.id)
    terms = conn.execute(
        select(func.count()).where(Term.collection_id == coll.id, Term.document_frequency > 0)
    ).scalar_one()
    return {
        "name": coll.name,
        "settings": CollectionSettings.model_validate(coll.settings).model_dump(),
        "documents": total,
        "documents_without_terms": empty,
        "terms": int(terms),
        "changes": coll.change_count,
        "created_at": coll.created_at.isoformat(),
        "updated_at": coll.updated_at.isoformat(),
    }


def _get(session: Session, name: str) -> Collection:
    coll = session.scalars(select(Collection).where(Collection.name == check_name(name))).first()
    if coll is None:
        raise NotFoundError(f"collection {name!r} does not exist", {"collection": name})
    return coll


def create_collection(session: Session, name: Any, settings: Any = None) -> dict[str, Any]:
    check_name(name)
    parsed = parse_settings(settings)
    duplicate = ConflictError(f"collection {name!r} already exists", {"collection": name})
    # Insert and let the unique name decide: no read before the write, which on SQLite
    # would make the transaction unable to write once another writer committed.
    now = utcnow()
    coll = Collection(
        name=name, settings=parsed.model_dump(), created_at=now, updated_at=now, change_count=0
    )
    session.add(coll)
    try:
        session.commit()
    except IntegrityError as exc:  # the name exists (perhaps created just now)
        session.rollback()
        raise duplicate from exc
    return _view(session, coll)


def list_collections(session: Session) -> list[dict[str, Any]]:
    colls = session.scalars(select(Collection).order_by(Collection.name)).all()
    return [_view(session, c) for c in colls]


def get_collection(session: Session, name: str) -> dict[str, Any]:
    return _view(session, _get(session, name))


def get_settings(session: Session, name: str) -> CollectionSettings:
    return CollectionSettings.model_validate(_get(session, name).settings)


def update_collection(session: Session, name: str, patch: Any) -> dict[str, Any]:
    """Change settings. Tokenisation (language, stemming) is fixed once documents exist,
    because the stored term counts were made with it."""
    check_name(name)
    locked = repo.lock_collection(session.connection(), name)
    current = CollectionSettings.model_validate(locked.settings)
    merged = merge_settings(current, patch)
    changed = {k for k in TOKENISATION_FIELDS if getattr(merged, k) != getattr(current, k)}
    if changed and repo.document_counts(session.connection(), locked.id)[0] > 0:
        session.rollback()
        raise ConflictError(
            f"{', '.join(sorted(changed))} cannot change while the collection holds documents: "
            "the stored term counts depend on it; create a new collection instead",
            {"fields": sorted(changed)},
        )
    coll = session.get(Collection, locked.id)
    assert coll is not None
    coll.settings = merged.model_dump()
    session.commit()
    return _view(session, coll)


def delete_collection(session: Session, name: str) -> None:
    """Delete the collection with all its documents and terms, for real."""
    check_name(name)
    conn = session.connection()
    locked = repo.lock_collection(conn, name)
    repo.delete_collection_rows(conn, locked.id)
    session.commit()
