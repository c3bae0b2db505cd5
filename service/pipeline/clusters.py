"""Groups of the active index as a reader sees them, and the names editors give them.

A group is what the build found (k-means on diffusion coordinates, label terms by the
log-odds ratio of Monroe, Colaresi & Quinn 2008, representatives nearest the centre),
under the stable id that Hungarian matching of overlaps carries across rebuilds
(service.geometry.matching). What a reader sees is the live group (service.pipeline.
live_index): the version's members minus the documents deleted or changed since the
build, plus the provisional documents whose strongest neighbours lie in it.

Editor names live in the cluster_names table keyed by (collection, stable id), not by
version, so a name follows its id across rebuilds; a name whose id is not in the active
version stays stored but is not shown.

What is computed when
---------------------
- per version (cached on the QueryView): every row's published_at, read in one query,
  as int64 microseconds since the epoch. A row that is not hidden has not changed since
  the build, so its date cannot have changed either;
- per `Live` (one per version and change count): the visible rows, provisional members
  and month counts of every group;
- per request: the names (one small query) and the answer.
"""

from __future__ import annotations

import threading
import weakref
from dataclasses import dataclass
from datetime import UTC, datetime, timedelta
from functools import lru_cache
from typing import Any

import numpy as np
from numpy.typing import NDArray
from sqlalchemy import Engine, delete, insert, select, update

from service.errors import InvalidInputError, NotFoundError
from service.pipeline.documents import decode_cursor_fields
from service.pipeline.documents import encode_cursor as encode_document_cursor
from service.pipeline.formatting import iso
from service.pipeline.index_content_types import STABLE_GROUP, GroupRecord
from service.pipeline.live_index import Live
from service.pipeline.query_view import QueryView
from service.storage import repository as repo
from service.storage.models import ClusterName, Document
from service.storage.types import utcnow

DOCUMENTS = Document.__table__
NAMES = ClusterName.__table__

MAX_NAME = 200
MAX_LIMIT = 500
# "No published_at" in the microsecond and month-code arrays. Month codes count months
# from 1970-01 and are negative before it, hence a sentinel outside any real date.
NO_DATE = np.iinfo(np.int64).min
_EPOCH = datetime(1970, 1, 1, tzinfo=UTC)
_MICROSECOND = timedelta(microseconds=1)

__all__ = [
    "MAX_LIMIT",
    "MAX_NAME",
    "GroupTable",
    "get_group",
    "group_names",
    "group_table",
    "list_groups",
    "month_codes",
    "month_counts",
    "rename_group",
]


# --- dates -------------------------------------------------------------------------


def _microseconds(value: datetime | None) -> int:
    return NO_DATE if value is None else (value - _EPOCH) // _MICROSECOND


def month_codes(micros: NDArray[np.int64]) -> NDArray[np.int64]:
    """Months since 1970-01 (negative before) of microsecond timestamps; NO_DATE stays."""
    micros = np.asarray(micros, dtype=np.int64)
    dated = micros != NO_DATE
    out = np.full(micros.shape, NO_DATE, dtype=np.int64)
    out[dated] = micros[dated].astype("datetime64[us]").astype("datetime64[M]").astype(np.int64)
    return out


@lru_cache(maxsize=4096)  # months repeat across groups: the labels were most of the time
def _month_label(code: int) -> str:
    year, month = divmod(code, 12)  # floor division: right before 1970 too
    return f"{year + 1970:04d}-{month + 1:02d}"


def month_counts(codes: NDArray[np.int64]) -> list[dict[str, Any]]:
    """``[{"month": "2024-03", "count": n}]`` in calendar order, undated last (month null)."""
    codes = np.asarray(codes, dtype=np.int64)
    values, counts = np.unique(codes, return_counts=True)
    out: list[dict[str, Any]] = []
    undated = 0
    for value, count in zip(values.tolist(), counts.tolist(), strict=True):
        if value == NO_DATE:
            undated = count
        else:
            out.append({"month": _month_label(value), "count": count})
    if undated:
        out.append({"month": None, "count": undated})
    return out


def _published(engine: Engine, view: QueryView) -> NDArray[np.int64]:
    """published_at of every row of the version (microseconds; NO_DATE), read once."""

    def make() -> NDArray[np.int64]:
        doc_ids = view.doc_ids
        out = np.full(doc_ids.size, NO_DATE, dtype=np.int64)
        with engine.connect() as conn:
            rows = conn.execution_options(yield_per=10_000).execute(
                select(DOCUMENTS.c.id, DOCUMENTS.c.published_at).where(
                    DOCUMENTS.c.collection_id == view.version.collection_id,
                    DOCUMENTS.c.published_at.is_not(None),
                )
            )
            found = [(int(i), _microseconds(p)) for i, p in rows]
        if found:
            ids = np.fromiter((i for i, _ in found), dtype=np.int64, count=len(found))
            micros = np.fromiter((m for _, m in found), dtype=np.int64, count=len(found))
            pos = np.clip(np.searchsorted(doc_ids, ids), 0, max(doc_ids.size - 1, 0))
            # Documents stored after the build are not rows of the version.
            hit = doc_ids[pos] == ids if doc_ids.size else np.zeros(ids.size, bool)
            out[pos[hit]] = micros[hit]
        out.setflags(write=False)
        return out

    return view._cached(("clusters.published",), make)  # type: ignore[no-any-return]


# --- the live groups ---------------------------------------------------------------


@dataclass(frozen=True, eq=False)
class LiveGroup:
    record: GroupRecord
    rows: NDArray[np.int64]  # visible rows of the version, ascending (= by internal id)
    extras: list[int]  # indices into Live.provisional, ascending internal id
    months: list[dict[str, Any]]

    @property
    def size(self) -> int:
        return int(self.rows.size) + len(self.extras)


@dataclass(frozen=True, eq=False)
class GroupTable:
    groups: dict[int, LiveGroup]  # by stable id
    order: list[int]  # stable ids by live size descending, then id
    ungrouped: int  # live documents in no group (isolated, no terms, unplaced)
    published: NDArray[np.int64]  # per row of the version


_tables: weakref.WeakKeyDictionary[Live, GroupTable] = weakref.WeakKeyDictionary()
_tables_lock = threading.Lock()


def group_table(engine: Engine, live: Live) -> GroupTable:
    """The live groups of ``live``, computed once per Live object (version, changes)."""
    with _tables_lock:
        table = _tables.get(live)
    if table is None:
        table = _make_table(live, _published(engine, live.view))
        with _tables_lock:
            # Two requests may both have computed it: keep the first, same content.
            table = _tables.setdefault(live, table)
    return table


def _make_table(live: Live, published: NDArray[np.int64]) -> GroupTable:
    view = live.view
    stable = np.asarray(view.version.arrays[STABLE_GROUP], dtype=np.int64)
    visible = ~live.hidden
    rows = np.flatnonzero(visible & (stable >= 0)).astype(np.int64)
    # A stable sort keeps rows ascending inside each group.
    rows = rows[np.argsort(stable[rows], kind="stable")]
    ids, starts = np.unique(stable[rows], return_index=True)
    stops = np.append(starts[1:], rows.size)
    bounds = {int(g): (int(a), int(b)) for g, a, b in zip(ids, starts, stops, strict=True)}
    extras: dict[int, list[int]] = {}
    loose = 0
    for i, doc in enumerate(live.provisional):
        if doc.group is None:
            loose += 1
        else:
            extras.setdefault(doc.group, []).append(i)
    codes = month_codes(published)
    groups: dict[int, LiveGroup] = {}
    for record in view.version.groups:
        start, stop = bounds.get(record.stable_id, (0, 0))
        members = rows[start:stop]
        mine = extras.get(record.stable_id, [])
        extra_codes = np.fromiter(
            (_microseconds(live.provisional[i].published_at) for i in mine),
            dtype=np.int64,
            count=len(mine),
        )
        group_codes = np.concatenate([codes[members], month_codes(extra_codes)])
        groups[record.stable_id] = LiveGroup(record, members, mine, month_counts(group_codes))
    order = sorted(groups, key=lambda g: (-groups[g].size, g))
    return GroupTable(
        groups=groups,
        order=order,
        ungrouped=int(np.count_nonzero(visible & (stable < 0))) + loose,
        published=published,
    )


# --- answers -----------------------------------------------------------------------


def group_names(engine: Engine, collection_id: int) -> dict[int, str]:
    """The editors' names of a collection's groups, by stable id (one query)."""
    with engine.connect() as conn:
        return {
            int(sid): name
            for sid, name in conn.execute(
                select(NAMES.c.stable_id, NAMES.c.name).where(
                    NAMES.c.collection_id == collection_id
                )
            )
        }


def _header(live: Live) -> dict[str, Any]:
    version = live.view.version
    return {"collection": version.collection, "version": version.number}


def _representatives(live: Live, record: GroupRecord) -> list[dict[str, Any]]:
    view = live.view
    out = []
    for doc_id in record.representatives:
        row = int(np.searchsorted(view.doc_ids, doc_id))
        if row < view.doc_ids.size and view.doc_ids[row] == doc_id and not live.hidden[row]:
            out.append({"id": view.external_ids[row], "title": view.titles[row]})
    return out


def _group_out(live: Live, group: LiveGroup, name: str | None) -> dict[str, Any]:
    record = group.record
    return {
        "id": record.stable_id,
        "name": name,
        "size": group.size,
        "label_terms": [dict(term) for term in record.label_terms],
        "representatives": _representatives(live, record),
        "months": [dict(m) for m in group.months],
        "provisional": len(group.extras),
    }


def _find(live: Live, table: GroupTable, stable_id: int) -> LiveGroup:
    group = table.groups.get(stable_id)
    if group is None:
        version = live.view.version
        raise NotFoundError(
            f"group {stable_id} is not in index version {version.number} of collection "
            f"{version.collection!r}; GET /v1/collections/{version.collection}/clusters "
            "lists its groups",
            {"collection": version.collection, "group": stable_id, "version": version.number},
        )
    return group


def list_groups(engine: Engine, live: Live, names: dict[int, str] | None = None) -> dict[str, Any]:
    """GET .../clusters: every group of the active version, largest first (``names``:
    the editors' names when the caller has read them already)."""
    table = group_table(engine, live)
    if names is None:
        names = group_names(engine, live.view.version.collection_id)
    return _header(live) | {
        "clusters": [_group_out(live, table.groups[g], names.get(g)) for g in table.order],
        "ungrouped": table.ungrouped,
    }


def encode_cursor(after: int, provisional: bool) -> str:
    return encode_document_cursor(after, provisional=provisional)


def _check_provisional(value: dict[str, Any]) -> None:
    if not isinstance(value["provisional"], bool):
        raise ValueError(value["provisional"])


def decode_cursor(cursor: str) -> tuple[int, bool]:
    """(last internal id given out, whether it was a provisional member); 400 otherwise."""
    value = decode_cursor_fields(cursor, _check_provisional)
    return int(value["after"]), bool(value["provisional"])


def _iso_micros(value: int) -> str | None:
    return None if value == NO_DATE else iso(_EPOCH + timedelta(microseconds=value))


def _members(
    live: Live, table: GroupTable, group: LiveGroup, cursor: str | None, limit: int
) -> tuple[list[dict[str, Any]], str | None]:
    """One page: indexed members by internal id, then provisional ones by internal id.

    Keyset pagination on (provisional, internal id): deletions between pages neither
    repeat nor skip a member that is still there."""
    view = live.view
    indexed_ids = view.doc_ids[group.rows]
    extra_ids = np.array([live.provisional[i].doc_id for i in group.extras], dtype=np.int64)
    if cursor is None:
        start = 0
    else:
        after, provisional = decode_cursor(cursor)
        if provisional:
            start = group.rows.size + int(np.searchsorted(extra_ids, after, side="right"))
        else:
            start = int(np.searchsorted(indexed_ids, after, side="right"))
    stop = min(start + limit, group.size)
    page: list[dict[str, Any]] = []
    for k in range(start, stop):
        if k < group.rows.size:
            row = int(group.rows[k])
            page.append(
                {
                    "id": view.external_ids[row],
                    "title": view.titles[row],
                    "published_at": _iso_micros(int(table.published[row])),
                    "provisional": False,
                }
            )
        else:
            doc = live.provisional[group.extras[k - group.rows.size]]
            page.append(
                {
                    "id": doc.external_id,
                    "title": doc.title,
                    "published_at": iso(doc.published_at),
                    "provisional": True,
                }
            )
    if stop >= group.size or stop <= start:
        return page, None
    last = stop - 1
    if last < group.rows.size:
        return page, encode_cursor(int(indexed_ids[last]), False)
    return page, encode_cursor(int(extra_ids[last - group.rows.size]), True)


def get_group(
    engine: Engine, live: Live, stable_id: int, *, cursor: str | None, limit: int
) -> dict[str, Any]:
    """GET .../clusters/{g}: the group and a page of its members."""
    if not 1 <= limit <= MAX_LIMIT:
        raise InvalidInputError(f"limit must lie in 1..{MAX_LIMIT}, got {limit}", {"limit": limit})
    table = group_table(engine, live)
    group = _find(live, table, stable_id)
    names = group_names(engine, live.view.version.collection_id)
    members, next_cursor = _members(live, table, group, cursor, limit)
    return (
        _header(live)
        | _group_out(live, group, names.get(stable_id))
        | {"members": members, "next_cursor": next_cursor}
    )


def clean_name(value: Any) -> str | None:
    """The stored form of an editor name: stripped; None (remove) for null or blank."""
    if value is None:
        return None
    if not isinstance(value, str):
        raise InvalidInputError(
            "name must be a string or null",
            [{"field": "name", "problem": f"got {type(value).__name__}"}],
        )
    name = value.strip()
    if len(name) > MAX_NAME:
        raise InvalidInputError(
            f"name is {len(name)} characters long; at most {MAX_NAME}",
            [{"field": "name", "problem": f"at most {MAX_NAME} characters"}],
        )
    # PostgreSQL text cannot hold NUL; other control characters make no sense in a name.
    if any(ord(ch) < 32 or ord(ch) == 127 for ch in name):
        raise InvalidInputError(
            "name must not contain control characters (tabs, line breaks, NUL...)",
            [{"field": "name", "problem": "control character"}],
        )
    return name or None


def rename_group(engine: Engine, live: Live, stable_id: int, value: Any) -> dict[str, Any]:
    """PATCH .../clusters/{g}: give, change or remove (null or blank) the editor name."""
    name = clean_name(value)
    version = live.view.version
    table = group_table(engine, live)
    group = _find(live, table, stable_id)
    with engine.begin() as conn:
        # Serialise name changes of the collection (and see it still exists).
        held = repo.hold_collection(conn, name=version.collection)
        if held is None or int(held.id) != version.collection_id:
            raise NotFoundError(
                f"collection {version.collection!r} does not exist",
                {"collection": version.collection},
            )
        where = (NAMES.c.collection_id == version.collection_id) & (NAMES.c.stable_id == stable_id)
        if name is None:
            conn.execute(delete(NAMES).where(where))
        elif conn.execute(select(NAMES.c.id).where(where)).first() is None:
            conn.execute(
                insert(NAMES).values(
                    collection_id=version.collection_id,
                    stable_id=stable_id,
                    name=name,
                    updated_at=utcnow(),
                )
            )
        else:
            conn.execute(update(NAMES).where(where).values(name=name, updated_at=utcnow()))
    return _header(live) | _group_out(live, group, name)
