"""API processes hold a version in memory and switch when a newer one is published, no
sooner than the check interval; retention never pulls a held version from under a query."""

from __future__ import annotations

import numpy as np
import pytest
from sqlalchemy import Engine

from service.errors import ConflictError, NotFoundError
from service.pipeline.index_content_types import DOC_IDS
from service.pipeline.version_cache import VersionCache
from tests.build_factories import (
    add_collection,
    array_version_ids,
    factory,
    queue,
    run_until_finished,
    upsert,
    worker,
)


class Clock:
    def __init__(self) -> None:
        self.now = 0.0

    def __call__(self) -> float:
        return self.now


def test_cache_swaps_after_publication_and_keeps_old_arrays(engine: Engine) -> None:
    make = factory(engine)
    add_collection(make, "news", 6)
    clock = Clock()
    cache = VersionCache(make, check_seconds=5.0, clock=clock)
    with pytest.raises(ConflictError, match="no index yet"):
        cache.get("news")
    with pytest.raises(NotFoundError):
        cache.get("nope")
    w = worker(make, keep_versions=1)
    run_until_finished(w, make, queue(make, "news"))
    first = cache.get("news")
    held = first.arrays[DOC_IDS]
    expected = held.copy()
    assert first.number == 1 and cache.loads == 1
    assert cache.get("news") is first  # from memory
    upsert(make, "news", [{"id": "late", "text": "harbour boats late"}])
    run_until_finished(w, make, queue(make, "news"))
    # keep_versions=1: the first version's rows are gone from the database now...
    assert len(array_version_ids(make)) == 1
    clock.now = 4.9
    assert cache.get("news") is first  # not checked again yet
    clock.now = 5.1
    second = cache.get("news")
    assert second.number == 2 and cache.loads == 2
    assert second.arrays[DOC_IDS].shape == (7,)
    # ...but a query holding the first version still reads the same, immutable arrays.
    np.testing.assert_array_equal(held, expected)
    assert not held.flags.writeable
    clock.now = 20.0
    assert cache.get("news") is second and cache.loads == 2  # one cheap check, no load
