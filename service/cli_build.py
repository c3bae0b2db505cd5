"""``tidemap build`` and ``tidemap worker``, and the embedded worker of ``tidemap serve``.

Kept apart from service/cli.py while that file is being edited; ``register(sub)`` adds the
two commands to its sub-parsers, and ``embedded_worker(settings, engine)`` wraps
``uvicorn.run`` in ``cmd_serve``::

    with embedded_worker(settings, engine):
        uvicorn.run(...)
"""

from __future__ import annotations

import argparse
import json
import logging
import sys
import threading
import time
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from typing import Any

from sqlalchemy import Engine
from sqlalchemy.orm import Session, sessionmaker
from tqdm import tqdm

from service.config import Settings, load_settings
from service.pipeline.builds import enqueue_build, get_build
from service.pipeline.index_content_types import ComputeFn
from service.storage.jobs import FINISHED, SUCCEEDED
from service.storage.session import make_engine, make_session_factory
from service.worker.embedded import EmbeddedWorker, wants_embedded_worker
from service.worker.shutdown import run_in_foreground
from service.worker.worker import Worker, WorkerOptions

WAIT_POLL_SECONDS = 0.5
HINT_AFTER_SECONDS = 10.0


@contextmanager
def _engine(settings: Settings) -> Iterator[Engine]:
    from service.cli import prepare_schema  # the composition root; imported late (no cycle)

    engine = make_engine(settings.database_url)
    try:
        prepare_schema(engine, auto_upgrade=settings.auto_upgrade)
        yield engine
    finally:
        engine.dispose()


@contextmanager
def embedded_worker(
    settings: Settings, engine: Engine, *, compute: ComputeFn | None = None
) -> Iterator[EmbeddedWorker | None]:
    """Run a worker thread for the duration (TIDEMAP_EMBEDDED_WORKER; auto = SQLite only)."""
    if not wants_embedded_worker(settings.embedded_worker, engine.dialect.name):
        yield None
        return
    embedded = EmbeddedWorker(
        make_session_factory(engine), WorkerOptions.from_settings(settings), compute=compute
    ).start()
    try:
        yield embedded
    finally:
        embedded.stop()


def _configure_logging(settings: Settings) -> None:
    if not logging.getLogger().handlers:
        logging.basicConfig(
            level=settings.log_level.upper(),
            format="%(asctime)s %(levelname)s %(name)s: %(message)s",
            stream=sys.stderr,
        )


# --- tidemap worker ----------------------------------------------------------------------


def cmd_worker(args: argparse.Namespace, *, compute: ComputeFn | None = None) -> int:
    settings = load_settings()
    _configure_logging(settings)
    overrides = {} if args.poll_seconds is None else {"poll_seconds": args.poll_seconds}
    with _engine(settings) as engine:
        worker = Worker(
            make_session_factory(engine),
            WorkerOptions.from_settings(settings, **overrides),
            compute=compute,
        )
        return run_in_foreground(worker, once=args.once)


# --- tidemap build -----------------------------------------------------------------------


def follow_build(
    factory: sessionmaker[Session],
    collection: str,
    build_id: int,
    *,
    quiet: bool,
    poll_seconds: float = WAIT_POLL_SECONDS,
    alive: Callable[[], bool] | None = None,
) -> dict[str, Any]:
    """Wait for the build to finish, drawing its stage and fraction as a progress bar."""
    disable = quiet or not sys.stderr.isatty()
    started = time.monotonic()
    hinted = False
    with tqdm(total=100, file=sys.stderr, disable=disable, bar_format="{desc} {bar} {n}%") as bar:
        while True:
            with factory() as session:
                job = get_build(session, collection, build_id)
            if job["state"] in FINISHED:
                return job
            stage = job["stage"] or job["state"]
            bar.set_description_str(f"build {build_id}: {stage}")
            bar.n = round(100 * job["progress"])
            bar.refresh()
            waited = time.monotonic() - started
            if job["state"] == "queued" and waited > HINT_AFTER_SECONDS and not hinted:
                hinted = True
                print(
                    f"build {build_id} is still queued: is a worker running (`tidemap worker`, "
                    "or `tidemap serve` with the embedded worker)? `tidemap build --here` runs "
                    "it in this process",
                    file=sys.stderr,
                )
            if alive is not None and not alive():
                with factory() as session:
                    return get_build(session, collection, build_id)
            time.sleep(poll_seconds)


def _describe(job: dict[str, Any]) -> str:
    if job["state"] == SUCCEEDED:
        total = sum(job["timings"].values())
        return f"build {job['id']} succeeded: version {job['version']} ({total:.1f} s)"
    return f"build {job['id']} {job['state']}: {job['error'] or 'no reason recorded'}"


def cmd_build(args: argparse.Namespace, *, compute: ComputeFn | None = None) -> int:
    settings = load_settings()
    with _engine(settings) as engine:
        factory = make_session_factory(engine)
        with factory() as session:
            queued = enqueue_build(
                session, args.collection, trigger="cli", max_attempts=settings.build_max_attempts
            )
        job = queued.job
        verb = "is already" if queued.existing else "is now"
        print(f"build {job['id']} of {args.collection!r} {verb} {job['state']}", file=sys.stderr)
        if not (args.wait or args.here):
            print(json.dumps(job | {"existing": queued.existing}) if args.json else job["id"])
            return 0
        runner: threading.Thread | None = None
        worker: Worker | None = None
        if args.here:
            _configure_logging(settings)
            worker = Worker(factory, WorkerOptions.from_settings(settings), compute=compute)
            runner = _run_until_finished(worker, factory, args.collection, job["id"])
        try:
            final = follow_build(
                factory,
                args.collection,
                job["id"],
                quiet=args.quiet,
                alive=None if runner is None else runner.is_alive,
            )
        except KeyboardInterrupt:
            if worker is not None:
                worker.request_stop()
                worker.abandon()
            raise
        if runner is not None:
            runner.join()
    print(json.dumps(final) if args.json else _describe(final))
    return 0 if final["state"] == SUCCEEDED else 1


def _run_until_finished(
    worker: Worker, factory: sessionmaker[Session], collection: str, build_id: int
) -> threading.Thread:
    """Run queued jobs in a thread of this process until ``build_id`` has finished."""

    def loop() -> None:
        while not worker.stopping:
            with factory() as session:
                if get_build(session, collection, build_id)["state"] in FINISHED:
                    return
            if worker.run_once() is None:
                time.sleep(worker.options.poll_seconds)

    thread = threading.Thread(target=loop, name="tidemap-build-here", daemon=True)
    thread.start()
    return thread


# --- registration ------------------------------------------------------------------------


def _seconds(text: str) -> float:
    value = float(text)
    if not value > 0:
        raise argparse.ArgumentTypeError(f"must be more than 0 seconds, got {text}")
    return value


def register(sub: Any) -> None:
    """Add ``build`` and ``worker`` to the ``tidemap`` sub-parsers."""
    text = "Queue an index build of a collection (and follow it with --wait)."
    p = sub.add_parser("build", help=text, description=text)
    p.set_defaults(handler=cmd_build)
    p.add_argument("collection", help="the collection to build")
    p.add_argument("--wait", action="store_true", help="follow the build until it finishes")
    p.add_argument(
        "--here",
        action="store_true",
        help="run queued builds in this process until this one finishes (implies --wait)",
    )
    p.add_argument("--quiet", action="store_true", help="no progress bar")
    p.add_argument("--json", action="store_true", help="print the build as JSON")

    text = "Run builds from the queue, and the re-index schedule, until stopped (SIGTERM)."
    p = sub.add_parser("worker", help=text, description=text)
    p.set_defaults(handler=cmd_worker)
    p.add_argument("--once", action="store_true", help="one round (at most one job), then exit")
    p.add_argument(
        "--poll-seconds",
        type=_seconds,
        default=None,
        help="how often an idle worker looks for jobs (default TIDEMAP_WORKER_POLL_SECONDS, 2)",
    )
