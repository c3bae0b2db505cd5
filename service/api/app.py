"""The FastAPI application, built from explicit settings (no globals)."""

from __future__ import annotations

from collections.abc import AsyncIterator
from contextlib import asynccontextmanager

from fastapi import FastAPI
from sqlalchemy import Engine

from service.api.errors import install_error_handlers
from service.api.fast_path import FastPathCounts, QueryFastPath
from service.api.routes import (
    builds,
    clusters,
    collections,
    documents,
    health,
    map_export,
    map_page,
    paths,
    queries,
)
from service.config import Settings
from service.pipeline.keys import KeyVerifier
from service.pipeline.live_index import LiveIndex
from service.pipeline.preload import preload_active_indexes
from service.pipeline.query_search import warm_search
from service.pipeline.version_cache import VersionCache
from service.storage.schema import require_current
from service.storage.session import make_engine, make_session_factory


@asynccontextmanager
async def _lifespan(app: FastAPI) -> AsyncIterator[None]:
    """Before the server takes connections: the active indexes, when so configured (it
    blocks the loop on purpose; nothing is served yet)."""
    app.state.preload = None
    if app.state.settings.preload_indexes:
        app.state.preload = preload_active_indexes(app.state.engine, app.state.live_index)
    yield


def create_app(
    settings: Settings, engine: Engine | None = None, *, fast_path: bool = True
) -> FastAPI:
    """Build the app. Refuses (SchemaMismatchError) a database whose schema is not current.

    ``fast_path=False`` leaves out service.api.fast_path (tests compare the two)."""
    engine = engine or make_engine(settings.database_url)
    require_current(engine)
    app = FastAPI(
        lifespan=_lifespan,
        title="Tidemap",
        version="1",
        summary="A diffusion-geometry map of a text archive.",
        description="Authenticate with `Authorization: Bearer <key>` (see `tidemap keys create`).",
    )
    app.state.settings = settings
    app.state.engine = engine
    app.state.session_factory = make_session_factory(engine)
    app.state.key_verifier = KeyVerifier(settings.auth_cache_seconds, engine)
    # Loaded index versions, shared by the query routes of this process.
    app.state.version_cache = VersionCache(
        app.state.session_factory, check_seconds=settings.version_check_seconds
    )
    # What queries see: the active version, minus deletions, plus provisional documents.
    app.state.live_index = LiveIndex(engine, app.state.version_cache, on_load=warm_search)
    install_error_handlers(app)
    app.state.fast_path = FastPathCounts()
    if fast_path:
        app.add_middleware(QueryFastPath)
    # Routes are matched in order: the busiest first. No two patterns overlap.
    app.include_router(queries.router)
    app.include_router(health.router)
    app.include_router(collections.router)
    app.include_router(documents.router)
    app.include_router(builds.router)
    app.include_router(map_page.router)
    app.include_router(paths.router)
    app.include_router(clusters.router)
    app.include_router(map_export.router)
    return app
