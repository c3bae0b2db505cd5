"""The application factory for ``uvicorn --factory`` (several worker processes, benchmarks).

Each uvicorn worker process imports this module and calls the factory, so the settings
are read from the TIDEMAP_* environment in that process. ``tidemap serve`` checks the
schema before it starts the workers; ``create_app`` checks it again in every worker.
"""

from __future__ import annotations

from fastapi import FastAPI

from service.api.app import create_app
from service.config import load_settings


def app_from_environment() -> FastAPI:
    """Build the app from the TIDEMAP_* environment of the calling process."""
    return create_app(load_settings())
