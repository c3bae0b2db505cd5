"""Typed answers for collections, documents, builds and the index summary.

Each is a frozen dataclass read from the service's JSON with the fields the service
documents; ``raw`` keeps the whole JSON object, so a field a newer service adds is still
reachable without a new client. Timestamps become timezone-aware datetimes.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from datetime import datetime
from typing import Any, Generic, TypeVar

T = TypeVar("T")
Json = Mapping[str, Any]

# The build states after which nothing changes any more.
FINISHED_STATES = frozenset({"succeeded", "failed", "cancelled"})


def when(value: Any) -> datetime | None:
    """An ISO 8601 timestamp of the service, or None."""
    return None if value is None else datetime.fromisoformat(str(value))


def opt_float(value: Any) -> float | None:
    return None if value is None else float(value)


def opt_int(value: Any) -> int | None:
    return None if value is None else int(value)


def opt_str(value: Any) -> str | None:
    return None if value is None else str(value)


@dataclass(frozen=True, kw_only=True)
class Page(Generic[T]):
    """One page of a listing; pass ``next_cursor`` back for the next (None: the last)."""

    items: tuple[T, ...]
    next_cursor: str | None

    @classmethod
    def from_json(cls, data: Json, item: Callable[[Json], T]) -> Page[T]:
        return cls(
            items=tuple(item(x) for x in data["items"]), next_cursor=opt_str(data["next_cursor"])
        )


@dataclass(frozen=True, kw_only=True)
class Collection:
    name: str
    settings: Mapping[str, Any]  # every setting, defaults filled in
    documents: int
    documents_without_terms: int
    terms: int
    changes: int
    created_at: datetime | None
    updated_at: datetime | None
    raw: Json = field(default_factory=dict, repr=False, compare=False)

    @classmethod
    def from_json(cls, data: Json) -> Collection:
        return cls(
            name=str(data["name"]),
            settings=dict(data["settings"]),
            documents=int(data["documents"]),
            documents_without_terms=int(data["documents_without_terms"]),
            terms=int(data["terms"]),
            changes=int(data["changes"]),
            created_at=when(data["created_at"]),
            updated_at=when(data["updated_at"]),
            raw=data,
        )


@dataclass(frozen=True, kw_only=True)
class UpsertResult:
    id: str
    status: str  # inserted, updated or unchanged

    @classmethod
    def from_json(cls, data: Json) -> UpsertResult:
        return cls(id=str(data["id"]), status=str(data["status"]))


@dataclass(frozen=True, kw_only=True)
class BatchItem:
    index: int  # position in the list from 0, or NDJSON line from 1
    id: str | None
    status: str  # inserted, updated, unchanged or rejected
    error: Mapping[str, Any] | None  # {"code", "message", "details"} of a rejected item

    @classmethod
    def from_json(cls, data: Json) -> BatchItem:
        error = data.get("error")
        return cls(
            index=int(data["index"]),
            id=opt_str(data["id"]),
            status=str(data["status"]),
            error=None if error is None else dict(error),
        )


@dataclass(frozen=True, kw_only=True)
class BatchResult:
    inserted: int
    updated: int
    unchanged: int
    rejected: int
    items: tuple[BatchItem, ...]  # NDJSON: the rejected lines only

    @property
    def rejected_items(self) -> tuple[BatchItem, ...]:
        return tuple(item for item in self.items if item.status == "rejected")

    @classmethod
    def from_json(cls, data: Json) -> BatchResult:
        return cls(
            inserted=int(data["inserted"]),
            updated=int(data["updated"]),
            unchanged=int(data["unchanged"]),
            rejected=int(data["rejected"]),
            items=tuple(BatchItem.from_json(x) for x in data["items"]),
        )


@dataclass(frozen=True, kw_only=True)
class DocumentSummary:
    """A document as listed (without its text)."""

    id: str
    title: str
    metadata: Mapping[str, Any]
    published_at: datetime | None
    content_hash: str
    n_terms: int
    status: str  # ok, or no_terms: left out of the graph
    created_at: datetime | None
    updated_at: datetime | None
    raw: Json = field(default_factory=dict, repr=False, compare=False)

    @classmethod
    def _fields(cls, data: Json) -> dict[str, Any]:
        return {
            "id": str(data["id"]),
            "title": str(data["title"]),
            "metadata": dict(data["metadata"]),
            "published_at": when(data["published_at"]),
            "content_hash": str(data["content_hash"]),
            "n_terms": int(data["n_terms"]),
            "status": str(data["status"]),
            "created_at": when(data["created_at"]),
            "updated_at": when(data["updated_at"]),
            "raw": data,
        }

    @classmethod
    def from_json(cls, data: Json) -> DocumentSummary:
        return cls(**cls._fields(data))


@dataclass(frozen=True, kw_only=True)
class Document(DocumentSummary):
    """One document with its text."""

    text: str

    @classmethod
    def from_json(cls, data: Json) -> Document:
        return cls(**cls._fields(data), text=str(data["text"]))


@dataclass(frozen=True, kw_only=True)
class Lease:
    owner: str
    expires_at: datetime | None


@dataclass(frozen=True, kw_only=True)
class BuildStatus:
    """An index build: state (queued, running, succeeded, failed, cancelled), stage and the
    fraction of it done, attempts, error, seconds per stage, statistics, the version it
    published; ``existing`` is set on start_build (True: one was already queued or running)."""

    id: int
    collection: str
    kind: str
    state: str
    stage: str | None
    progress: float
    attempts: int
    max_attempts: int
    trigger: str
    cancel_requested: bool
    error: str | None
    timings: Mapping[str, float]
    statistics: Mapping[str, Any]
    version: int | None
    lease: Lease | None
    retry_after: datetime | None
    created_at: datetime | None
    started_at: datetime | None
    finished_at: datetime | None
    existing: bool | None = None
    raw: Json = field(default_factory=dict, repr=False, compare=False)

    @property
    def finished(self) -> bool:
        return self.state in FINISHED_STATES

    @property
    def succeeded(self) -> bool:
        return self.state == "succeeded"

    @classmethod
    def from_json(cls, data: Json) -> BuildStatus:
        lease = data["lease"]
        existing = data.get("existing")
        return cls(
            id=int(data["id"]),
            collection=str(data["collection"]),
            kind=str(data["kind"]),
            state=str(data["state"]),
            stage=opt_str(data["stage"]),
            progress=float(data["progress"]),
            attempts=int(data["attempts"]),
            max_attempts=int(data["max_attempts"]),
            trigger=str(data["trigger"]),
            cancel_requested=bool(data["cancel_requested"]),
            error=opt_str(data["error"]),
            timings={str(k): float(v) for k, v in data["timings"].items()},
            statistics=dict(data["statistics"]),
            version=opt_int(data["version"]),
            lease=None
            if lease is None
            else Lease(owner=str(lease["owner"]), expires_at=when(lease["expires_at"])),
            retry_after=when(data["retry_after"]),
            created_at=when(data["created_at"]),
            started_at=when(data["started_at"]),
            finished_at=when(data["finished_at"]),
            existing=None if existing is None else bool(existing),
            raw=data,
        )


@dataclass(frozen=True, kw_only=True)
class Staleness:
    """Documents added, changed and deleted since the active version's snapshot."""

    added: int
    changed: int
    deleted: int
    total: int
    changes_since: int


@dataclass(frozen=True, kw_only=True)
class IndexSummary:
    """The collection's active index version."""

    collection: str
    version: int
    built_at: datetime | None
    documents: int  # in the map (with terms)
    documents_excluded: Mapping[str, Any]  # left out, by reason
    vocabulary_size: int | None
    edges: int | None
    components: int | None
    isolated: int | None
    eigenvalues: tuple[float, ...] | None
    coordinates: int | None  # diffusion coordinates kept
    groups: int | None
    parameters: Mapping[str, Any]
    staleness: Staleness
    building: Mapping[str, Any] | None  # a build queued or running now
    raw: Json = field(default_factory=dict, repr=False, compare=False)

    @classmethod
    def from_json(cls, data: Json) -> IndexSummary:
        stale, eigen, building = data["staleness"], data["eigenvalues"], data["building"]
        return cls(
            collection=str(data["collection"]),
            version=int(data["version"]),
            built_at=when(data["built_at"]),
            documents=int(data["documents"]),
            documents_excluded=dict(data["documents_excluded"]),
            vocabulary_size=opt_int(data["vocabulary_size"]),
            edges=opt_int(data["edges"]),
            components=opt_int(data["components"]),
            isolated=opt_int(data["isolated"]),
            eigenvalues=None if eigen is None else tuple(float(x) for x in eigen),
            coordinates=opt_int(data["coordinates"]),
            groups=opt_int(data["groups"]),
            parameters=dict(data["parameters"]),
            staleness=Staleness(**{k: int(stale[k]) for k in Staleness.__dataclass_fields__}),
            building=None if building is None else dict(building),
            raw=data,
        )
