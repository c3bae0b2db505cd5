"""Active indexes loaded when an API process starts, before its first query."""

from __future__ import annotations

from sqlalchemy import Engine

from service.pipeline.live_index import Live
from service.pipeline.preload import preload_active_indexes
from tests.build_factories import add_collection, factory
from tests.factories import auth, make_client, make_keys
from tests.query_fixtures import built_collection


def test_a_started_app_has_each_active_index_loaded_before_any_query(
    engine: Engine, database_url: str
) -> None:
    built = built_collection(engine, "stdlib")
    add_collection(factory(engine), "unbuilt", 0, None)  # no version: nothing to load
    keys = make_keys(engine)
    with make_client(engine, database_url) as client:
        state = client.app.state  # type: ignore[attr-defined]
        assert state.preload.loaded == ["stdlib"] and state.preload.failed == {}
        assert isinstance(state.live_index.peek("stdlib"), Live)  # current, nothing to load
        answered = state.fast_path.answered
        doc = built.documents[0]["id"]
        response = client.get(
            f"/v1/collections/stdlib/documents/{doc}/neighbors?k=3", headers=auth(keys["read"])
        )
        assert response.status_code == 200, response.text
        # The fast path answered it: the live index was current, no load was due.
        assert state.fast_path.answered == answered + 1


def test_with_preloading_off_the_first_query_loads(engine: Engine, database_url: str) -> None:
    built_collection(engine, "stdlib")
    with make_client(engine, database_url, preload_indexes=False) as client:
        state = client.app.state  # type: ignore[attr-defined]
        assert state.preload is None
        assert state.live_index.peek("stdlib") is None


class _Failing:
    """A live index whose every load fails, as an unreadable version would."""

    def __init__(self) -> None:
        self.asked: list[str] = []

    def get(self, collection: str) -> None:
        self.asked.append(collection)
        raise OSError("the version's arrays could not be read")


def test_a_collection_that_fails_to_load_is_reported_not_raised(engine: Engine) -> None:
    built_collection(engine, "stdlib")
    failing = _Failing()
    report = preload_active_indexes(engine, failing)  # type: ignore[arg-type]
    assert failing.asked == ["stdlib"]
    assert report.loaded == []
    assert report.failed == {"stdlib": "OSError: the version's arrays could not be read"}
