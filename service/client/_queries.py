"""Typed answers of the queries: related documents, similar-to-a-draft, distances, paths.

Every query answer names the index version it came from (``version``). Distances are
diffusion distances computed from the coordinates kept: the true one lies in
``[distance, upper]``, with ``bound`` bounding what truncation left out of its square.
"""

from __future__ import annotations

from dataclasses import dataclass, field

from service.client._models import Json, opt_float, opt_int, opt_str


@dataclass(frozen=True, kw_only=True)
class QueryPoint:
    """The document (or end of a path) a query is about."""

    id: str
    title: str
    provisional: bool  # newer than the build: placed by the Nystrom extension
    component: int | None  # None: isolated (its component is too small to map)

    @classmethod
    def from_json(cls, data: Json) -> QueryPoint:
        return cls(
            id=str(data["id"]),
            title=str(data["title"]),
            provisional=bool(data["provisional"]),
            component=opt_int(data["component"]),
        )


@dataclass(frozen=True, kw_only=True)
class Search:
    method: str  # exact, hnsw, or none (an isolated point)
    recall: float | None = None  # hnsw: measured recall@10 against exact search

    @classmethod
    def from_json(cls, data: Json) -> Search:
        return cls(method=str(data["method"]), recall=opt_float(data.get("recall")))


@dataclass(frozen=True, kw_only=True)
class Neighbor:
    id: str
    title: str
    distance: float
    bound: float | None
    upper: float | None
    cosine: float  # plain TF-IDF cosine similarity, for comparison
    provisional: bool

    @classmethod
    def from_json(cls, data: Json) -> Neighbor:
        return cls(
            id=str(data["id"]),
            title=str(data["title"]),
            distance=float(data["distance"]),
            bound=opt_float(data["bound"]),
            upper=opt_float(data["upper"]),
            cosine=float(data["cosine"]),
            provisional=bool(data["provisional"]),
        )


def _neighbors(data: Json) -> tuple[Neighbor, ...]:
    return tuple(Neighbor.from_json(n) for n in data["neighbors"])


@dataclass(frozen=True, kw_only=True)
class NeighborsAnswer:
    collection: str
    version: int
    t: float
    k: int
    document: QueryPoint
    neighbors: tuple[Neighbor, ...]  # nearest first
    search: Search
    note: str | None = None  # why the list is empty (an isolated document)
    raw: Json = field(default_factory=dict, repr=False, compare=False)

    @classmethod
    def from_json(cls, data: Json) -> NeighborsAnswer:
        return cls(
            collection=str(data["collection"]),
            version=int(data["version"]),
            t=float(data["t"]),
            k=int(data["k"]),
            document=QueryPoint.from_json(data["document"]),
            neighbors=_neighbors(data),
            search=Search.from_json(data["search"]),
            note=opt_str(data.get("note")),
            raw=data,
        )


@dataclass(frozen=True, kw_only=True)
class SimilarAnswer:
    """Related documents of a draft; nothing was stored."""

    collection: str
    version: int
    t: float
    k: int
    component: int | None
    coords: tuple[float, ...]  # the draft's diffusion coordinates in its component
    neighbors: tuple[Neighbor, ...]
    search: Search
    note: str | None = None
    raw: Json = field(default_factory=dict, repr=False, compare=False)

    @classmethod
    def from_json(cls, data: Json) -> SimilarAnswer:
        return cls(
            collection=str(data["collection"]),
            version=int(data["version"]),
            t=float(data["t"]),
            k=int(data["k"]),
            component=opt_int(data["component"]),
            coords=tuple(float(x) for x in data["coords"]),
            neighbors=_neighbors(data),
            search=Search.from_json(data["search"]),
            note=opt_str(data.get("note")),
            raw=data,
        )


@dataclass(frozen=True, kw_only=True)
class Distance:
    """The distance to one target; ``infinite`` (distance None) across components."""

    to: str
    provisional: bool
    distance: float | None
    bound: float | None
    upper: float | None
    infinite: bool
    reason: str | None = None

    @classmethod
    def from_json(cls, data: Json) -> Distance:
        return cls(
            to=str(data["to"]),
            provisional=bool(data["provisional"]),
            distance=opt_float(data["distance"]),
            bound=opt_float(data["bound"]),
            upper=opt_float(data["upper"]),
            infinite=bool(data["infinite"]),
            reason=opt_str(data.get("reason")),
        )


@dataclass(frozen=True, kw_only=True)
class DistanceAnswer:
    collection: str
    version: int
    t: float
    source: QueryPoint  # the answer's "from"
    distances: tuple[Distance, ...]  # in the order of the targets asked
    raw: Json = field(default_factory=dict, repr=False, compare=False)

    @classmethod
    def from_json(cls, data: Json) -> DistanceAnswer:
        return cls(
            collection=str(data["collection"]),
            version=int(data["version"]),
            t=float(data["t"]),
            source=QueryPoint.from_json(data["from"]),
            distances=tuple(Distance.from_json(d) for d in data["distances"]),
            raw=data,
        )


@dataclass(frozen=True, kw_only=True)
class SharedTerm:
    term: str
    weight: float  # product of the two documents' TF-IDF weights


@dataclass(frozen=True, kw_only=True)
class PathStep:
    source: str  # the step's "from"
    to: str
    source_title: str
    to_title: str
    probability: float  # transition probability of the map's random walk
    shared_terms: tuple[SharedTerm, ...]

    @classmethod
    def from_json(cls, data: Json) -> PathStep:
        return cls(
            source=str(data["from"]),
            to=str(data["to"]),
            source_title=str(data["from_title"]),
            to_title=str(data["to_title"]),
            probability=float(data["probability"]),
            shared_terms=tuple(
                SharedTerm(term=str(s["term"]), weight=float(s["weight"]))
                for s in data["shared_terms"]
            ),
        )


@dataclass(frozen=True, kw_only=True)
class PathDocument:
    id: str
    title: str
    provisional: bool


@dataclass(frozen=True, kw_only=True)
class PathAnswer:
    collection: str
    version: int
    source: QueryPoint
    to: QueryPoint
    found: bool  # False: different components or an isolated end, see reason
    probability: float
    log_probability: float | None
    steps: tuple[PathStep, ...]
    documents: tuple[PathDocument, ...]  # the chain, both ends included
    reason: str | None = None
    note: str | None = None
    raw: Json = field(default_factory=dict, repr=False, compare=False)

    @classmethod
    def from_json(cls, data: Json) -> PathAnswer:
        return cls(
            collection=str(data["collection"]),
            version=int(data["version"]),
            source=QueryPoint.from_json(data["from"]),
            to=QueryPoint.from_json(data["to"]),
            found=bool(data["found"]),
            probability=float(data["probability"]),
            log_probability=opt_float(data["log_probability"]),
            steps=tuple(PathStep.from_json(s) for s in data["steps"]),
            documents=tuple(
                PathDocument(
                    id=str(d["id"]), title=str(d["title"]), provisional=bool(d["provisional"])
                )
                for d in data["documents"]
            ),
            reason=opt_str(data.get("reason")),
            note=opt_str(data.get("note")),
            raw=data,
        )
