"""SQLAlchemy 2 typed models. The schema changes only through Alembic revisions
(migrations/); tests prove that these models and the migrations agree."""

from __future__ import annotations

from datetime import datetime
from typing import Any

from sqlalchemy import (
    JSON,
    Boolean,
    Float,
    ForeignKey,
    Index,
    Integer,
    LargeBinary,
    MetaData,
    String,
    Text,
    UniqueConstraint,
)
from sqlalchemy import text as sql  # `text` is also a column name below
from sqlalchemy.orm import DeclarativeBase, Mapped, mapped_column

from service.storage.types import BigIntPK, UTCDateTime, utcnow

# Explicit constraint names so migrations are identical on SQLite and PostgreSQL.
NAMING = {
    "ix": "ix_%(table_name)s_%(column_0_N_name)s",
    "uq": "uq_%(table_name)s_%(column_0_N_name)s",
    "ck": "ck_%(table_name)s_%(constraint_name)s",
    "fk": "fk_%(table_name)s_%(column_0_name)s_%(referred_table_name)s",
    "pk": "pk_%(table_name)s",
}


class Base(DeclarativeBase):
    metadata = MetaData(naming_convention=NAMING)


class Collection(Base):
    __tablename__ = "collections"

    id: Mapped[int] = mapped_column(BigIntPK, primary_key=True, autoincrement=True)
    name: Mapped[str] = mapped_column(String(64), unique=True)
    settings: Mapped[dict[str, Any]] = mapped_column(JSON)
    created_at: Mapped[datetime] = mapped_column(UTCDateTime, default=utcnow)
    updated_at: Mapped[datetime] = mapped_column(UTCDateTime, default=utcnow)
    # Bumped by every change to the collection's documents; later a build records the
    # value it saw, so staleness and "after M changes" need no scan.
    change_count: Mapped[int] = mapped_column(Integer, default=0)
    # The published index version queries use (None before the first build). A cycle with
    # index_versions.collection_id, hence use_alter: the key is added after both tables.
    active_version_id: Mapped[int | None] = mapped_column(
        ForeignKey(
            "index_versions.id",
            ondelete="SET NULL",
            use_alter=True,
            name="fk_collections_active_version_id_index_versions",
        ),
        nullable=True,
    )
    # The next stable group id a build may hand out (ids are never reused).
    next_group_id: Mapped[int] = mapped_column(Integer, default=0, server_default=sql("0"))
    # For the re-index schedule: when a build was last queued or published, and the
    # change count it covered.
    last_build_at: Mapped[datetime | None] = mapped_column(UTCDateTime, nullable=True)
    last_build_change_count: Mapped[int] = mapped_column(
        Integer, default=0, server_default=sql("0")
    )


class Document(Base):
    __tablename__ = "documents"
    __table_args__ = (
        UniqueConstraint("collection_id", "external_id"),
        Index("ix_documents_collection_id_id", "collection_id", "id"),
        Index("ix_documents_collection_id_revision", "collection_id", "revision"),
    )

    id: Mapped[int] = mapped_column(BigIntPK, primary_key=True, autoincrement=True)
    collection_id: Mapped[int] = mapped_column(ForeignKey("collections.id", ondelete="CASCADE"))
    external_id: Mapped[str] = mapped_column(String(256))
    title: Mapped[str] = mapped_column(Text)
    text: Mapped[str] = mapped_column(Text)
    # "metadata" is reserved by the declarative base, hence the attribute name.
    meta: Mapped[dict[str, Any]] = mapped_column("metadata", JSON)
    published_at: Mapped[datetime | None] = mapped_column(UTCDateTime, nullable=True)
    content_hash: Mapped[str] = mapped_column(String(64))
    # Sorted term ids and their counts (service.storage.codecs); empty when no terms.
    term_counts: Mapped[bytes] = mapped_column(LargeBinary)
    n_terms: Mapped[int] = mapped_column(Integer)
    created_at: Mapped[datetime] = mapped_column(UTCDateTime, default=utcnow)
    updated_at: Mapped[datetime] = mapped_column(UTCDateTime, default=utcnow)
    # The collection's change_count after the transaction that last wrote this row: a
    # build that saw change_count C holds exactly the rows with revision <= C, so
    # staleness is counted exactly, without comparing texts.
    revision: Mapped[int] = mapped_column(Integer, default=0, server_default=sql("0"))


class Term(Base):
    """A collection's dictionary: every term seen, with its exact document frequency.

    Term ids are global and never reused, hence stable per collection.
    """

    __tablename__ = "terms"
    __table_args__ = (UniqueConstraint("collection_id", "term"),)

    id: Mapped[int] = mapped_column(BigIntPK, primary_key=True, autoincrement=True)
    collection_id: Mapped[int] = mapped_column(ForeignKey("collections.id", ondelete="CASCADE"))
    term: Mapped[str] = mapped_column(String(64))
    document_frequency: Mapped[int] = mapped_column(Integer, default=0)


class ApiKey(Base):
    __tablename__ = "api_keys"

    id: Mapped[int] = mapped_column(BigIntPK, primary_key=True, autoincrement=True)
    name: Mapped[str] = mapped_column(String(100))
    # SHA-256 of the key: keys are 256-bit random, so a fast hash is enough.
    key_hash: Mapped[str] = mapped_column(String(64), unique=True)
    prefix: Mapped[str] = mapped_column(String(16))
    scope: Mapped[str] = mapped_column(String(16))
    created_at: Mapped[datetime] = mapped_column(UTCDateTime, default=utcnow)
    revoked_at: Mapped[datetime | None] = mapped_column(UTCDateTime, nullable=True)


JOB_STATES = ("queued", "running", "succeeded", "failed", "cancelled")
ACTIVE_JOB_STATES = ("queued", "running")


class Job(Base):
    """A unit of background work (kind "build"), claimed by a worker under a lease."""

    __tablename__ = "jobs"
    __table_args__ = (
        # At most one queued-or-running build per collection, whatever the number of
        # workers or API replicas: the database refuses a second one.
        Index(
            "uq_jobs_active_build",
            "collection_id",
            unique=True,
            sqlite_where=sql("kind = 'build' AND state IN ('queued', 'running')"),
            postgresql_where=sql("kind = 'build' AND state IN ('queued', 'running')"),
        ),
        Index("ix_jobs_state_not_before", "state", "not_before"),
        Index("ix_jobs_collection_id_id", "collection_id", "id"),
    )

    id: Mapped[int] = mapped_column(BigIntPK, primary_key=True, autoincrement=True)
    kind: Mapped[str] = mapped_column(String(32))
    collection_id: Mapped[int] = mapped_column(ForeignKey("collections.id", ondelete="CASCADE"))
    state: Mapped[str] = mapped_column(String(16))
    stage: Mapped[str | None] = mapped_column(String(64), nullable=True)
    progress: Mapped[float] = mapped_column(Float, default=0.0)
    attempts: Mapped[int] = mapped_column(Integer, default=0)
    max_attempts: Mapped[int] = mapped_column(Integer, default=3)
    lease_owner: Mapped[str | None] = mapped_column(String(128), nullable=True)
    lease_expires_at: Mapped[datetime | None] = mapped_column(UTCDateTime, nullable=True)
    # Back-off: a re-queued job is not claimed before this time.
    not_before: Mapped[datetime | None] = mapped_column(UTCDateTime, nullable=True)
    cancel_requested: Mapped[bool] = mapped_column(Boolean, default=False)
    error: Mapped[str | None] = mapped_column(Text, nullable=True)
    timings: Mapped[dict[str, Any]] = mapped_column(JSON, default=dict)
    statistics: Mapped[dict[str, Any]] = mapped_column(JSON, default=dict)
    trigger: Mapped[str] = mapped_column(String(16))
    version_id: Mapped[int | None] = mapped_column(
        ForeignKey("index_versions.id", ondelete="SET NULL"), nullable=True
    )
    created_at: Mapped[datetime] = mapped_column(UTCDateTime, default=utcnow)
    started_at: Mapped[datetime | None] = mapped_column(UTCDateTime, nullable=True)
    finished_at: Mapped[datetime | None] = mapped_column(UTCDateTime, nullable=True)


class IndexVersion(Base):
    """One build's result. Invisible while "building"; immutable once "published";
    "retired" when a newer one is published (kept for retention, then deleted)."""

    __tablename__ = "index_versions"
    __table_args__ = (
        # Numbers are given at publication, so published versions count 1, 2, 3...
        UniqueConstraint("collection_id", "number"),
        Index("ix_index_versions_collection_id_state", "collection_id", "state"),
    )

    id: Mapped[int] = mapped_column(BigIntPK, primary_key=True, autoincrement=True)
    collection_id: Mapped[int] = mapped_column(ForeignKey("collections.id", ondelete="CASCADE"))
    number: Mapped[int | None] = mapped_column(Integer, nullable=True)
    state: Mapped[str] = mapped_column(String(16))
    parameters: Mapped[dict[str, Any]] = mapped_column(JSON)
    statistics: Mapped[dict[str, Any]] = mapped_column(JSON)
    snapshot_change_count: Mapped[int] = mapped_column(Integer)
    n_documents: Mapped[int] = mapped_column(Integer)
    created_at: Mapped[datetime] = mapped_column(UTCDateTime, default=utcnow)
    published_at: Mapped[datetime | None] = mapped_column(UTCDateTime, nullable=True)


class IndexArray(Base):
    """One chunk of one stored array (service.storage.codecs.encode_array bytes)."""

    __tablename__ = "index_arrays"
    __table_args__ = (UniqueConstraint("version_id", "name", "chunk_no"),)

    id: Mapped[int] = mapped_column(BigIntPK, primary_key=True, autoincrement=True)
    version_id: Mapped[int] = mapped_column(ForeignKey("index_versions.id", ondelete="CASCADE"))
    name: Mapped[str] = mapped_column(String(64))
    dtype: Mapped[str] = mapped_column(String(16))
    shape: Mapped[list[int]] = mapped_column(JSON)
    chunk_no: Mapped[int] = mapped_column(Integer)
    data: Mapped[bytes] = mapped_column(LargeBinary)


class Cluster(Base):
    """A group of one index version, under its stable id."""

    __tablename__ = "clusters"
    __table_args__ = (UniqueConstraint("version_id", "stable_id"),)

    id: Mapped[int] = mapped_column(BigIntPK, primary_key=True, autoincrement=True)
    version_id: Mapped[int] = mapped_column(ForeignKey("index_versions.id", ondelete="CASCADE"))
    stable_id: Mapped[int] = mapped_column(Integer)
    size: Mapped[int] = mapped_column(Integer)
    label_terms: Mapped[list[dict[str, Any]]] = mapped_column(JSON)
    representatives: Mapped[list[int]] = mapped_column(JSON)


class ClusterName(Base):
    """An editor's name for a stable group id; it follows the id across rebuilds."""

    __tablename__ = "cluster_names"
    __table_args__ = (UniqueConstraint("collection_id", "stable_id"),)

    id: Mapped[int] = mapped_column(BigIntPK, primary_key=True, autoincrement=True)
    collection_id: Mapped[int] = mapped_column(ForeignKey("collections.id", ondelete="CASCADE"))
    stable_id: Mapped[int] = mapped_column(Integer)
    name: Mapped[str] = mapped_column(String(200))
    updated_at: Mapped[datetime] = mapped_column(UTCDateTime, default=utcnow)
