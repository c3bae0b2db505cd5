"""The worker thread inside ``tidemap serve``: with SQLite one process is a whole service.

TIDEMAP_EMBEDDED_WORKER: ``auto`` (the default) embeds a worker only with SQLite (with
PostgreSQL, workers are separate ``tidemap worker`` processes), ``on`` always, ``off`` never.
"""

from __future__ import annotations

import logging
import threading

from sqlalchemy.orm import Session, sessionmaker

from service.pipeline.index_content_types import ComputeFn
from service.worker.worker import Worker, WorkerOptions

log = logging.getLogger("tidemap.worker")


def wants_embedded_worker(setting: str, dialect: str) -> bool:
    """Whether ``tidemap serve`` runs a worker thread, for TIDEMAP_EMBEDDED_WORKER."""
    if setting not in ("auto", "on", "off"):
        raise ValueError(f"embedded_worker must be auto, on or off, got {setting!r}")
    return setting == "on" or (setting == "auto" and dialect == "sqlite")


class EmbeddedWorker:
    """A Worker looping in a daemon thread; ``stop`` ends it cleanly."""

    def __init__(
        self,
        factory: sessionmaker[Session],
        options: WorkerOptions | None = None,
        *,
        compute: ComputeFn | None = None,
    ) -> None:
        self.worker = Worker(factory, options, compute=compute)
        self._thread = threading.Thread(
            target=self.worker.run_forever, name="tidemap-embedded-worker", daemon=True
        )

    def start(self) -> EmbeddedWorker:
        self._thread.start()
        return self

    @property
    def alive(self) -> bool:
        return self._thread.is_alive()

    def stop(self, timeout: float = 10.0) -> None:
        """Ask the worker to stop at the next stage boundary; after ``timeout`` seconds,
        give its job back to the queue (the build thread dies with the process)."""
        self.worker.request_stop()
        self._thread.join(timeout)
        if self._thread.is_alive() and self.worker.abandon():
            log.warning("embedded worker: gave its running build back to the queue")
