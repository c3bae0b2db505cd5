"""The application factory for ``uvicorn --factory`` (several worker processes, benchmarks).

Each uvicorn worker process imports this module and calls the factory, so the settings
are read from the TIDEMAP_* environment in that process. ``tidemap serve`` checks the
schema before it starts the workers; ``create_app`` checks it again in every worker.
"""

from __future__ import annotations

from fastapi import FastAPI
from threadpoolctl import threadpool_limits

from service.api.app import create_app
from service.config import load_settings


def single_threaded_blas() -> None:
    """BLAS on one thread for the rest of this API process.

    A query's BLAS calls are small matrix-vector products that a second thread cannot
    speed up, but OpenBLAS's idle threads spin after each call: a sequential neighbors
    loop at 100k documents cost the server 2.56 ms of CPU per request with OpenBLAS's
    default two threads, and 0.84 ms with one (same requests, measured on this machine).
    Builds (`tidemap worker`) keep their threads; the embedded worker of `tidemap serve`
    shares the limit, which its spectrum already runs under.
    """
    threadpool_limits(limits=1, user_api="blas")


def app_from_environment() -> FastAPI:
    """Build the app from the TIDEMAP_* environment of the calling process."""
    single_threaded_blas()
    return create_app(load_settings())
