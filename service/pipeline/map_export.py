"""The whole map of a collection: every live document's diffusion coordinates and group.

``prepare_map`` takes everything from ONE `Live` object (service.pipeline.live_index)
and lays it out as arrays before the answer starts, so a rebuild, a delete or a new
document during a long download cannot mix two versions or two states in one answer;
``json_chunks`` / ``csv_chunks`` then write the answer a few thousand points at a time,
never holding the whole body.

Coordinates are the first ``dims`` diffusion coordinates ``lambda_k^t psi_k`` (k >= 1) of a
document's vertex within its connected component (Coifman & Lafon, "Diffusion maps",
Appl. Comput. Harmon. Anal. 21 (2006), section 2); coordinates of different components
are not comparable (no walk joins them), so each point names its component. A component
with fewer than ``dims`` kept coordinates is padded with 0. Provisional documents (newer
than the build) are placed by the Nystrom extension (service.pipeline.placement).

Order: the version's rows by internal id, then the provisional documents by internal id.
"""

from __future__ import annotations

import csv
import io
import json
from collections.abc import Iterator, Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np
from numpy.typing import NDArray

from service.errors import InvalidInputError
from service.pipeline.clusters import group_names  # editors' names, one query
from service.pipeline.live_index import Live, ProvisionalDoc
from service.pipeline.queries import _check_t, _header
from service.pipeline.query_view import QueryView, coordinate_scale

DIMS = (2, 3)
FORMATS = ("json", "csv")
CHUNK = 2_000  # points per written chunk
LABEL_TERMS = 5  # label terms per group in the header

# 9 significant digits give back the float32 exactly (IEEE 754 binary32 needs 9).
_FLOAT = "%.9g"
_encode = json.encoder.encode_basestring  # type: ignore[attr-defined]  # C speedup, '"..."'

__all__ = [
    "CHUNK",
    "DIMS",
    "FORMATS",
    "MapExport",
    "csv_chunks",
    "group_names",
    "json_chunks",
    "prepare_map",
]


@dataclass(frozen=True, eq=False)
class MapExport:
    """One map answer, ready to write: the header and per-point columns."""

    header: dict[str, Any]  # collection, version, t, dims, components, groups
    dims: int
    rows: NDArray[np.int64]  # the visible rows of the version, then the provisional docs
    external_ids: list[str]  # the view's (shared, never copied)
    titles: list[str]
    provisional_docs: list[ProvisionalDoc]
    group: NDArray[np.int64]  # -1: none
    component: NDArray[np.int64]  # -1: none (isolated, no terms, unplaced)
    provisional: NDArray[np.bool_]
    has_coords: NDArray[np.bool_]  # False: coords are null
    coords: NDArray[np.float32]  # (n, dims)

    @property
    def n_points(self) -> int:
        return self.rows.size + len(self.provisional_docs)

    def names(self, start: int, stop: int) -> Iterator[tuple[str, str]]:
        """(id, title) of points ``start`` to ``stop``."""
        for row in self.rows[start:stop].tolist():
            yield self.external_ids[row], self.titles[row]
        n = self.rows.size
        for doc in self.provisional_docs[max(start - n, 0) : max(stop - n, 0)]:
            yield doc.external_id, doc.title

    @property
    def filename(self) -> str:
        return f"{self.header['collection']}-map-v{self.header['version']}.csv"


def _check(dims: int, fmt: str) -> None:
    if dims not in DIMS:
        raise InvalidInputError(f"dims must be 2 or 3, got {dims}", {"dims": dims})
    if fmt not in FORMATS:
        raise InvalidInputError(f"format must be json or csv, got {fmt!r}", {"format": fmt})


def _vertex_coordinates(view: QueryView, dims: int, t: float) -> NDArray[np.float32]:
    """(n_v, dims) float32: each vertex's first ``dims`` coordinates in its component."""

    def make() -> NDArray[np.float32]:
        out = np.zeros((view.component.size, dims), dtype=np.float32)
        for c in range(view.n_components):
            width = min(view.n_coordinates(c), dims)
            if width == 0:
                continue
            if t == view.default_t:
                head = view.coordinates(c, t)[:, :width]  # the cached query coordinates
            else:
                lam, psi, _ = view.spectrum(c)
                scale = coordinate_scale(lam, t, view.n_coordinates(c))[:width]
                head = (psi[:, 1 : width + 1] * scale[None, :]).astype(np.float32)
            out[view.members[c], :width] = head
        out.setflags(write=False)
        return out

    if t == view.default_t:  # other t: computed per request, not kept (t is arbitrary)
        return view._cached(("map_coordinates", dims, t), make)  # type: ignore[no-any-return]
    return make()


def _provisional_columns(
    live: Live, dims: int, t: float
) -> tuple[NDArray[np.int64], NDArray[np.int64], NDArray[np.float32]]:
    n = len(live.provisional)
    group = np.full(n, -1, dtype=np.int64)
    component = np.full(n, -1, dtype=np.int64)
    coords = np.zeros((n, dims), dtype=np.float32)
    for i, doc in enumerate(live.provisional):
        if doc.group is not None:
            group[i] = doc.group
    for c, extra in live.extras.items():
        at = np.asarray(extra.docs, dtype=np.int64)
        component[at] = c
        width = min(live.view.n_coordinates(c), dims)
        coords[at, :width] = live.extra_coordinates(c, t)[:, :width]
    return group, component, coords


def _groups(live: Live, group: NDArray[np.int64], names: Mapping[int, str]) -> list[dict[str, Any]]:
    """The version's groups with their live member counts, plus any group a point names
    that the version does not list (none expected)."""
    ids, counts = np.unique(group[group >= 0], return_counts=True)
    live_size = dict(zip(ids.tolist(), counts.tolist(), strict=True))
    out = []
    seen = set()
    for g in live.view.version.groups:
        terms = sorted(g.label_terms, key=lambda x: -float(x.get("score", 0.0)))
        out.append(
            {
                "id": g.stable_id,
                "name": names.get(g.stable_id),
                "size": live_size.get(g.stable_id, 0),
                "label_terms": [str(x["term"]) for x in terms[:LABEL_TERMS]],
            }
        )
        seen.add(g.stable_id)
    for gid in sorted(set(live_size) - seen):
        out.append({"id": gid, "name": names.get(gid), "size": live_size[gid], "label_terms": []})
    return out


def prepare_map(
    live: Live, dims: int, t: float | None, fmt: str, names: Mapping[int, str]
) -> MapExport:
    """Everything the answer needs, from this one `Live`; raises before anything is
    written (InvalidInputError for dims, format or t)."""
    _check(dims, fmt)
    view = live.view
    t_value = _check_t(view, t)
    rows = np.flatnonzero(~live.hidden)
    vertex = view.vertex[rows]
    row_component = np.full(rows.size, -1, dtype=np.int64)
    on_graph = vertex >= 0
    row_component[on_graph] = view.component[vertex[on_graph]]
    row_coords = np.zeros((rows.size, dims), dtype=np.float32)
    mapped = row_component >= 0
    row_coords[mapped] = _vertex_coordinates(view, dims, t_value)[vertex[mapped]]
    stable = np.asarray(view.version.arrays["stable_group"], dtype=np.int64)[rows]

    p_group, p_component, p_coords = _provisional_columns(live, dims, t_value)
    group = np.concatenate([stable, p_group])
    component = np.concatenate([row_component, p_component])
    coords = np.vstack([row_coords, p_coords])
    # A non-finite coordinate (not expected) is written as null, never as invalid JSON.
    has_coords = (component >= 0) & np.isfinite(coords).all(axis=1)

    sizes = np.bincount(component[component >= 0], minlength=view.n_components)
    header = _header(live, t_value) | {
        "dims": dims,
        "components": [{"component": c, "size": int(sizes[c])} for c in range(view.n_components)],
        "groups": _groups(live, group, names),
    }
    return MapExport(
        header=header,
        dims=dims,
        rows=rows,
        external_ids=view.external_ids,
        titles=view.titles,
        provisional_docs=live.provisional,
        group=group,
        component=component,
        provisional=np.arange(group.size) >= rows.size,
        has_coords=has_coords,
        coords=coords,
    )


def _number(values: list[int]) -> list[str]:
    return ["null" if v < 0 else str(v) for v in values]


def _point_texts(export: MapExport, start: int, stop: int) -> Iterator[tuple[str, ...]]:
    """(id, title, group, component, provisional, coords...) as JSON texts."""
    groups = _number(export.group[start:stop].tolist())
    components = _number(export.component[start:stop].tolist())
    provisional = export.provisional[start:stop].tolist()
    has = export.has_coords[start:stop].tolist()
    coords = export.coords[start:stop].tolist()
    for j, (ident, title) in enumerate(export.names(start, stop)):
        yield (
            ident,
            title,
            groups[j],
            components[j],
            "true" if provisional[j] else "false",
            *([_FLOAT % x for x in coords[j]] if has[j] else ()),
        )


def json_chunks(export: MapExport, chunk: int = CHUNK) -> Iterator[bytes]:
    """The JSON answer: the header, then ``chunk`` points per piece (UTF-8 bytes)."""
    head = json.dumps(export.header, ensure_ascii=False, separators=(",", ":"))
    yield (head[:-1] + ',"points":[').encode("utf-8")
    for start in range(0, export.n_points, chunk):
        stop = min(start + chunk, export.n_points)
        parts = [
            f'{{"id":{_encode(ident)},"title":{_encode(title)},"group":{group},'
            f'"component":{component},"provisional":{provisional},'
            f'"coords":{"[" + ",".join(xs) + "]" if xs else "null"}}}'
            for ident, title, group, component, provisional, *xs in _point_texts(
                export, start, stop
            )
        ]
        yield (("," if start else "") + ",".join(parts)).encode("utf-8")
    yield b"]}"


def csv_columns(dims: int) -> list[str]:
    return ["id", "title", "group", "component", "provisional", *"xyz"[:dims]]


def csv_chunks(export: MapExport, chunk: int = CHUNK) -> Iterator[bytes]:
    """The CSV answer (RFC 4180: CRLF line ends, fields quoted when they need it); an
    empty field is null (no group, no component, no coordinates)."""
    buffer = io.StringIO()
    writer = csv.writer(buffer, lineterminator="\r\n")
    writer.writerow(csv_columns(export.dims))
    empty = [""] * export.dims
    for start in range(0, export.n_points, chunk):
        stop = min(start + chunk, export.n_points)
        writer.writerows(
            [
                ident,
                title,
                "" if group == "null" else group,
                "" if component == "null" else component,
                provisional,
                *(xs or empty),
            ]
            for ident, title, group, component, provisional, *xs in _point_texts(
                export, start, stop
            )
        )
        yield buffer.getvalue().encode("utf-8")
        buffer.seek(0)
        buffer.truncate()
    if export.n_points == 0:
        yield buffer.getvalue().encode("utf-8")
