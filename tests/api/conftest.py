from __future__ import annotations

from collections.abc import Iterator

import pytest
from sqlalchemy import Engine

from tests.factories import SMALL_LIMITS, TestClient, make_client, make_keys


@pytest.fixture
def keys(engine: Engine) -> dict[str, str]:
    return make_keys(engine)


@pytest.fixture
def client(engine: Engine, database_url: str) -> Iterator[TestClient]:
    with make_client(engine, database_url) as test_client:
        yield test_client


@pytest.fixture
def small_client(engine: Engine, database_url: str) -> Iterator[TestClient]:
    with make_client(engine, database_url, **SMALL_LIMITS) as test_client:
        yield test_client
