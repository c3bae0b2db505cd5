"""LiveIndex keeps loaded versions away from the cyclic collector, and lets old ones go."""

from __future__ import annotations

import gc
import weakref

import pytest
from sqlalchemy import Engine

from service.errors import NotFoundError
from service.pipeline.collections import delete_collection
from service.pipeline.live_index import LiveIndex
from service.pipeline.version_cache import VersionCache
from service.storage.session import make_session_factory
from tests.query_fixtures import build, built_collection


def test_a_loaded_version_is_frozen_and_an_old_one_is_freed(engine: Engine) -> None:
    built_collection(engine, "frozen")
    index = LiveIndex(engine, VersionCache(make_session_factory(engine), check_seconds=0))
    first = index.get("frozen").view
    assert gc.get_freeze_count() > 0
    # The view's own containers are among the frozen objects the collector skips.
    assert not any(obj is first.external_ids for obj in gc.get_objects())
    old = weakref.ref(first)
    del first

    build(engine, "frozen")  # a second version is published
    second = index.get("frozen").view
    assert second.version.number == 2
    # The first view was frozen; loading the second unfroze and collected, and nothing
    # holds the first any more.
    gc.collect()
    assert old() is None


def test_a_deleted_collection_leaves_the_process(engine: Engine) -> None:
    built_collection(engine, "gone")
    index = LiveIndex(engine, VersionCache(make_session_factory(engine), check_seconds=0))
    view = weakref.ref(index.get("gone").view)
    with make_session_factory(engine)() as session:
        delete_collection(session, "gone")
    with pytest.raises(NotFoundError):
        index.get("gone")
    gc.collect()
    assert view() is None  # its ids and titles are no longer held


def test_on_load_runs_once_per_loaded_version(engine: Engine) -> None:
    built_collection(engine, "hook")
    seen: list[int] = []
    index = LiveIndex(
        engine,
        VersionCache(make_session_factory(engine), check_seconds=0),
        on_load=lambda view: seen.append(view.version.number),
    )
    index.get("hook")
    index.get("hook")  # current: nothing loaded
    build(engine, "hook")
    index.get("hook")
    assert seen == [1, 2]


def test_warm_search_starts_the_index_of_large_components(
    engine: Engine, monkeypatch: pytest.MonkeyPatch
) -> None:
    from service.pipeline import query_search

    built_collection(engine, "warm")
    monkeypatch.setattr(query_search, "INDEXED_MIN_VERTICES", 50)  # the test corpus is small
    index = LiveIndex(
        engine,
        VersionCache(make_session_factory(engine), check_seconds=0),
        on_load=query_search.warm_search,
    )
    view = index.get("warm").view
    large = [c for c, m in enumerate(view.members) if m.size >= 50]
    assert large  # the corpus has a component of at least 50 documents
    for c in large:
        assert ("hnsw", c, view.default_t) in view._cache


def test_a_version_built_with_its_coordinate_index_is_searched_through_it(
    engine: Engine, monkeypatch: pytest.MonkeyPatch
) -> None:
    from service.pipeline import coordinate_indexes, queries, query_search

    # Both the build and the queries take the small test corpus's components as large.
    monkeypatch.setattr(coordinate_indexes, "INDEXED_MIN_VERTICES", 50)
    monkeypatch.setattr(query_search, "INDEXED_MIN_VERTICES", 50)
    built_collection(engine, "stored")
    index = LiveIndex(
        engine,
        VersionCache(make_session_factory(engine), check_seconds=0),
        on_load=query_search.warm_search,
    )
    live = index.get("stored")
    view = live.view
    stats = view.version.statistics["coordinate_indexes"]
    assert stats and all(s["vertices"] >= 50 for s in stats)
    for entry in stats:
        holder = view._cache[("hnsw", entry["component"], view.default_t)]
        assert isinstance(holder, query_search.StoredIndex)  # read back, not rebuilt
        assert holder.recall == entry["recall"]
    c = stats[0]["component"]
    row = next(r for r, v in enumerate(view.vertex.tolist()) if v >= 0 and view.component[v] == c)
    answer = queries.neighbors(engine, live, view.external_ids[row], 5, None)
    assert answer["search"] == {"method": "hnsw", "recall": stats[0]["recall"]}
    assert len(answer["neighbors"]) == 5
