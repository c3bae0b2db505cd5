"""`TidemapClient`: the service's HTTP API as typed Python calls (sync, httpx).

Methods return the frozen dataclasses of `_models`, `_queries` and `_groups`; an error
answer raises the `TidemapApiError` subclass of its status (`_errors`). The client keeps
no state but its base URL, key and httpx connection pool.
"""

from __future__ import annotations

import json
import time
from collections.abc import Iterable, Iterator, Mapping, Sequence
from datetime import date
from types import TracebackType
from typing import Any

import httpx

from service.client._errors import BuildFailedError, BuildTimeoutError
from service.client._groups import Cluster, ClusterList, ClusterMember, ClusterPage, MapExport
from service.client._http import (
    Connection,
    Params,
    document_body,
    every_item,
    iso,
    page_params,
    segment,
)
from service.client._models import (
    BatchResult,
    BuildStatus,
    Collection,
    Document,
    DocumentSummary,
    IndexSummary,
    Json,
    Page,
    UpsertResult,
)
from service.client._queries import DistanceAnswer, NeighborsAnswer, PathAnswer, SimilarAnswer


def _collections(data: Json) -> list[Collection]:
    return [Collection.from_json(c) for c in data["items"]]


def _document_page(data: Json) -> Page[DocumentSummary]:
    return Page.from_json(data, DocumentSummary.from_json)


def _build_page(data: Json) -> Page[BuildStatus]:
    return Page.from_json(data, BuildStatus.from_json)


class TidemapClient:
    """A client of one Tidemap service.

    ``base_url`` is where the service answers (``http://127.0.0.1:8000``; a path prefix is
    kept), ``key`` an API key of the scope the calls need (read to look, write for
    documents and builds, admin for collections). Without ``http`` the client opens its own
    ``httpx.Client`` with ``timeout`` seconds and closes it in `close`; with ``http`` (any
    ``httpx.Client``, e.g. FastAPI's TestClient) every request goes through that one, with
    its own timeouts, and `close` leaves it open.
    """

    def __init__(
        self,
        base_url: str,
        key: str,
        *,
        timeout: float = 30.0,
        http: httpx.Client | None = None,
    ) -> None:
        self._conn = Connection(base_url, key, timeout, http)

    @property
    def base_url(self) -> str:
        return self._conn.base_url

    def close(self) -> None:
        self._conn.close()

    def __enter__(self) -> TidemapClient:
        return self

    def __exit__(
        self,
        exc_type: type[BaseException] | None,
        exc: BaseException | None,
        tb: TracebackType | None,
    ) -> None:
        self.close()

    def __repr__(self) -> str:
        return f"TidemapClient({self.base_url!r})"  # never the key

    @staticmethod
    def _c(collection: str, rest: str = "") -> str:
        return f"/v1/collections/{segment(collection)}{rest}"

    # --- collections --------------------------------------------------------------------

    def create_collection(self, name: str, settings: Mapping[str, Any] | None = None) -> Collection:
        """A new collection; settings not given get their defaults (ConflictError if it exists)."""
        body: dict[str, Any] = {"name": name}
        if settings is not None:
            body["settings"] = dict(settings)
        return self._conn.call(Collection.from_json, "POST", "/v1/collections", json=body)

    def get_collection(self, name: str) -> Collection:
        return self._conn.call(Collection.from_json, "GET", self._c(name))

    def list_collections(self) -> list[Collection]:
        return self._conn.call(_collections, "GET", "/v1/collections")

    def update_collection(self, name: str, settings: Mapping[str, Any]) -> Collection:
        """Change only the settings given; the others keep their values."""
        body = {"settings": dict(settings)}
        return self._conn.call(Collection.from_json, "PATCH", self._c(name), json=body)

    def delete_collection(self, name: str) -> None:
        """Delete it with all its documents, for real."""
        self._conn.send("DELETE", self._c(name))

    # --- documents ------------------------------------------------------------------------

    def put_document(
        self,
        collection: str,
        document_id: str,
        text: str,
        *,
        title: str | None = None,
        metadata: Mapping[str, Any] | None = None,
        published_at: str | date | None = None,
    ) -> UpsertResult:
        """Create or replace one document; ``status`` is inserted, updated or unchanged."""
        body: dict[str, Any] = {"text": text}
        if title is not None:
            body["title"] = title
        if metadata is not None:
            body["metadata"] = dict(metadata)
        if published_at is not None:
            body["published_at"] = iso(published_at)
        path = self._c(collection, f"/documents/{segment(document_id)}")
        return self._conn.call(UpsertResult.from_json, "PUT", path, json=body)

    def upsert_documents(
        self, collection: str, documents: Iterable[Mapping[str, Any]]
    ) -> BatchResult:
        """One JSON list of ``{"id", "text", "title", "metadata", "published_at"}`` (at
        most the service's ``max_batch_items``), every item reported by position. Valid
        items are stored even when others are rejected: check ``rejected``."""
        body = [document_body(d) for d in documents]
        path = self._c(collection, "/documents")
        return self._conn.call(BatchResult.from_json, "POST", path, json=body)

    def upsert_documents_ndjson(
        self, collection: str, documents: Iterable[Mapping[str, Any]]
    ) -> BatchResult:
        """Any number of documents, streamed as NDJSON (committed in chunks by the
        service); only the rejected lines are reported, by line number from 1."""
        lines = (json.dumps(document_body(d)).encode("utf-8") + b"\n" for d in documents)
        headers = {"Content-Type": "application/x-ndjson"}
        path = self._c(collection, "/documents")
        return self._conn.call(BatchResult.from_json, "POST", path, content=lines, headers=headers)

    def get_document(self, collection: str, document_id: str) -> Document:
        path = self._c(collection, f"/documents/{segment(document_id)}")
        return self._conn.call(Document.from_json, "GET", path)

    def list_documents(
        self, collection: str, *, cursor: str | None = None, limit: int = 100
    ) -> Page[DocumentSummary]:
        """One page (``limit`` 1-1000), in the order the documents were first stored."""
        path, params = self._c(collection, "/documents"), page_params(cursor, limit)
        return self._conn.call(_document_page, "GET", path, params=params)

    def iter_documents(self, collection: str, *, page_size: int = 500) -> Iterator[DocumentSummary]:
        """Every document (without its text), following ``next_cursor``."""
        return every_item(lambda c: self.list_documents(collection, cursor=c, limit=page_size))

    def delete_document(self, collection: str, document_id: str) -> None:
        """Delete it for real; it leaves every answer at once, rebuild or not."""
        self._conn.send("DELETE", self._c(collection, f"/documents/{segment(document_id)}"))

    # --- builds and the index -------------------------------------------------------------

    def start_build(self, collection: str) -> BuildStatus:
        """Queue a build; while one is queued or running, that one (``existing=True``)."""
        return self._conn.call(BuildStatus.from_json, "POST", self._c(collection, "/builds"))

    def get_build(self, collection: str, build_id: int) -> BuildStatus:
        path = self._c(collection, f"/builds/{int(build_id)}")
        return self._conn.call(BuildStatus.from_json, "GET", path)

    def list_builds(
        self, collection: str, *, cursor: str | None = None, limit: int = 20
    ) -> Page[BuildStatus]:
        """One page of builds (``limit`` 1-200), newest first."""
        path, params = self._c(collection, "/builds"), page_params(cursor, limit)
        return self._conn.call(_build_page, "GET", path, params=params)

    def iter_builds(self, collection: str, *, page_size: int = 100) -> Iterator[BuildStatus]:
        return every_item(lambda c: self.list_builds(collection, cursor=c, limit=page_size))

    def cancel_build(self, collection: str, build_id: int) -> BuildStatus:
        """A queued build is cancelled at once; a running one stops at its next stage
        (``cancel_requested``); a finished one raises ConflictError."""
        path = self._c(collection, f"/builds/{int(build_id)}")
        return self._conn.call(BuildStatus.from_json, "DELETE", path)

    def wait_for_build(
        self,
        collection: str,
        build_id: int,
        *,
        timeout: float = 600.0,
        poll: float = 1.0,
        raise_on_failure: bool = True,
    ) -> BuildStatus:
        """Ask for the build every ``poll`` seconds until it has finished; its last status.

        BuildTimeoutError after ``timeout`` seconds (the build itself goes on);
        BuildFailedError when it failed or was cancelled, unless ``raise_on_failure`` is
        False.
        """
        if poll <= 0 or timeout < 0:
            raise ValueError(f"poll must be > 0 and timeout >= 0, got {poll}, {timeout}")
        start = time.monotonic()
        while True:
            status = self.get_build(collection, build_id)
            if status.finished:
                if raise_on_failure and not status.succeeded:
                    raise BuildFailedError(status)
                return status
            waited = time.monotonic() - start
            if waited >= timeout:
                raise BuildTimeoutError(status, waited)
            time.sleep(min(poll, timeout - waited))

    def index(self, collection: str) -> IndexSummary:
        """The active index version; ConflictError (``no_index``) before the first build."""
        return self._conn.call(IndexSummary.from_json, "GET", self._c(collection, "/index"))

    # --- queries ----------------------------------------------------------------------------

    def neighbors(
        self, collection: str, document_id: str, *, k: int = 10, t: float | None = None
    ) -> NeighborsAnswer:
        """The ``k`` documents nearest this one at diffusion time ``t`` (default: the
        collection's), nearest first."""
        params: Params = [("k", k)] + ([("t", t)] if t is not None else [])
        path = self._c(collection, f"/documents/{segment(document_id)}/neighbors")
        return self._conn.call(NeighborsAnswer.from_json, "GET", path, params=params)

    def similar(
        self,
        collection: str,
        text: str,
        *,
        title: str | None = None,
        k: int = 10,
        t: float | None = None,
    ) -> SimilarAnswer:
        """Related documents for a text not in the archive; nothing is stored."""
        body = {"text": text, "title": title, "k": k, "t": t}
        path = self._c(collection, "/similar")
        return self._conn.call(SimilarAnswer.from_json, "POST", path, json=body)

    def distance(
        self, collection: str, source: str, to: str | Sequence[str], *, t: float | None = None
    ) -> DistanceAnswer:
        """Diffusion distances from ``source`` to one target or several (at most 100)."""
        targets = [to] if isinstance(to, str) else list(to)
        params: Params = [("from", source)] + [("to", x) for x in targets]
        if t is not None:
            params.append(("t", t))
        path = self._c(collection, "/distance")
        return self._conn.call(DistanceAnswer.from_json, "GET", path, params=params)

    def path(self, collection: str, source: str, to: str) -> PathAnswer:
        """The most probable chain of documents from ``source`` to ``to``."""
        params: Params = [("from", source), ("to", to)]
        path = self._c(collection, "/path")
        return self._conn.call(PathAnswer.from_json, "GET", path, params=params)

    # --- groups -----------------------------------------------------------------------------

    def clusters(self, collection: str) -> ClusterList:
        """Every group of the active index, largest first."""
        return self._conn.call(ClusterList.from_json, "GET", self._c(collection, "/clusters"))

    def cluster(
        self, collection: str, group_id: int, *, cursor: str | None = None, limit: int = 50
    ) -> ClusterPage:
        """One group and a page of its members (``limit`` 1-500)."""
        path = self._c(collection, f"/clusters/{int(group_id)}")
        params = page_params(cursor, limit)
        return self._conn.call(ClusterPage.from_json, "GET", path, params=params)

    def iter_cluster_members(
        self, collection: str, group_id: int, *, page_size: int = 500
    ) -> Iterator[ClusterMember]:
        """Every member of the group, page after page."""

        def fetch(cursor: str | None) -> Page[ClusterMember]:
            page = self.cluster(collection, group_id, cursor=cursor, limit=page_size)
            return Page(items=page.members, next_cursor=page.next_cursor)

        return every_item(fetch)

    def rename_cluster(self, collection: str, group_id: int, name: str | None) -> Cluster:
        """The editor's name of the group (None or blank removes it); it follows the
        group's stable id across rebuilds."""
        path = self._c(collection, f"/clusters/{int(group_id)}")
        return self._conn.call(Cluster.from_json, "PATCH", path, json={"name": name})

    # --- the map ------------------------------------------------------------------------------

    @staticmethod
    def _map_params(dims: int, t: float | None, fmt: str) -> Params:
        return [("dims", dims), ("format", fmt)] + ([("t", t)] if t is not None else [])

    def map(self, collection: str, *, dims: int = 2, t: float | None = None) -> MapExport:
        """Every document's first ``dims`` (2 or 3) coordinates and group, read whole."""
        path, params = self._c(collection, "/map"), self._map_params(dims, t, "json")
        return self._conn.call(MapExport.from_json, "GET", path, params=params)

    def map_csv(self, collection: str, *, dims: int = 2, t: float | None = None) -> str:
        """The map as CSV text: ``id,title,group,component,provisional,x,y[,z]``."""
        path, params = self._c(collection, "/map"), self._map_params(dims, t, "csv")
        return self._conn.send("GET", path, params=params).text

    def iter_map_csv(
        self, collection: str, *, dims: int = 2, t: float | None = None
    ) -> Iterator[list[str]]:
        """The CSV map streamed row by row, the header first (an empty field is null);
        the request is sent when iteration starts."""
        path, params = self._c(collection, "/map"), self._map_params(dims, t, "csv")
        return self._conn.csv_rows(path, params)
