"""Typed answers about groups (list, one group with its members, editor names) and the
map export (every document's diffusion coordinates with its group)."""

from __future__ import annotations

from dataclasses import dataclass, field
from datetime import datetime

from service.client._models import Json, opt_int, opt_str, when


@dataclass(frozen=True, kw_only=True)
class LabelTerm:
    term: str
    score: float  # log-odds ratio against the rest of the collection
    count: int


@dataclass(frozen=True, kw_only=True)
class Representative:
    id: str
    title: str


@dataclass(frozen=True, kw_only=True)
class MonthCount:
    month: str | None  # "2024-03"; None for undated documents
    count: int


@dataclass(frozen=True, kw_only=True)
class Cluster:
    """A group of the active index, by stable id (it follows the group across rebuilds)."""

    id: int
    name: str | None  # the editor's name
    size: int  # live members, provisional ones counted
    label_terms: tuple[LabelTerm, ...]
    representatives: tuple[Representative, ...]
    months: tuple[MonthCount, ...]
    provisional: int  # how many members are provisional
    raw: Json = field(default_factory=dict, repr=False, compare=False)

    @classmethod
    def from_json(cls, data: Json) -> Cluster:
        return cls(
            id=int(data["id"]),
            name=opt_str(data["name"]),
            size=int(data["size"]),
            label_terms=tuple(
                LabelTerm(term=str(x["term"]), score=float(x["score"]), count=int(x["count"]))
                for x in data["label_terms"]
            ),
            representatives=tuple(
                Representative(id=str(r["id"]), title=str(r["title"]))
                for r in data["representatives"]
            ),
            months=tuple(
                MonthCount(month=opt_str(m["month"]), count=int(m["count"])) for m in data["months"]
            ),
            provisional=int(data["provisional"]),
            raw=data,
        )


@dataclass(frozen=True, kw_only=True)
class ClusterList:
    collection: str
    version: int
    clusters: tuple[Cluster, ...]  # largest first
    ungrouped: int  # live documents in no group

    @classmethod
    def from_json(cls, data: Json) -> ClusterList:
        return cls(
            collection=str(data["collection"]),
            version=int(data["version"]),
            clusters=tuple(Cluster.from_json(c) for c in data["clusters"]),
            ungrouped=int(data["ungrouped"]),
        )


@dataclass(frozen=True, kw_only=True)
class ClusterMember:
    id: str
    title: str
    published_at: datetime | None
    provisional: bool


@dataclass(frozen=True, kw_only=True)
class ClusterPage:
    """One group and one page of its members."""

    collection: str
    version: int
    cluster: Cluster
    members: tuple[ClusterMember, ...]
    next_cursor: str | None

    @classmethod
    def from_json(cls, data: Json) -> ClusterPage:
        return cls(
            collection=str(data["collection"]),
            version=int(data["version"]),
            cluster=Cluster.from_json(data),
            members=tuple(
                ClusterMember(
                    id=str(m["id"]),
                    title=str(m["title"]),
                    published_at=when(m["published_at"]),
                    provisional=bool(m["provisional"]),
                )
                for m in data["members"]
            ),
            next_cursor=opt_str(data["next_cursor"]),
        )


@dataclass(frozen=True, kw_only=True)
class MapGroup:
    id: int
    name: str | None
    size: int
    label_terms: tuple[str, ...]  # the five strongest


@dataclass(frozen=True, kw_only=True)
class MapPoint:
    id: str
    title: str
    group: int | None
    component: int | None
    provisional: bool
    coords: tuple[float, ...] | None  # None: isolated or without terms


@dataclass(frozen=True, kw_only=True)
class MapExport:
    """Every live document's first ``dims`` diffusion coordinates with its group;
    coordinates of different components are not comparable."""

    collection: str
    version: int
    t: float
    dims: int
    components: dict[int, int]  # component -> size
    groups: tuple[MapGroup, ...]
    points: tuple[MapPoint, ...]

    @classmethod
    def from_json(cls, data: Json) -> MapExport:
        return cls(
            collection=str(data["collection"]),
            version=int(data["version"]),
            t=float(data["t"]),
            dims=int(data["dims"]),
            components={int(c["component"]): int(c["size"]) for c in data["components"]},
            groups=tuple(
                MapGroup(
                    id=int(g["id"]),
                    name=opt_str(g["name"]),
                    size=int(g["size"]),
                    label_terms=tuple(str(x) for x in g["label_terms"]),
                )
                for g in data["groups"]
            ),
            points=tuple(
                MapPoint(
                    id=str(p["id"]),
                    title=str(p["title"]),
                    group=opt_int(p["group"]),
                    component=opt_int(p["component"]),
                    provisional=bool(p["provisional"]),
                    coords=None if p["coords"] is None else tuple(float(x) for x in p["coords"]),
                )
                for p in data["points"]
            ),
        )
