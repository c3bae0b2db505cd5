"""The ``tidemap`` command: the composition root that reads settings and wires the layers.

Exit codes: 0 success; 1 a command that failed (or an ingest with rejected documents);
2 a usage error or a database whose schema does not match this code; 130 interrupted.
"""

from __future__ import annotations

import argparse
import json
import os
import sys
import time
from collections.abc import Callable, Iterable, Iterator, Sequence
from contextlib import contextmanager
from typing import Any

from pydantic import ValidationError
from sqlalchemy import Engine, inspect
from sqlalchemy.engine import make_url
from sqlalchemy.exc import ArgumentError, OperationalError
from sqlalchemy.orm import Session
from tqdm import tqdm

from service.config import Settings, load_settings
from service.demo.archive import articles_as_records, generate_archive
from service.errors import NotFoundError, SchemaMismatchError, TidemapError
from service.pipeline.collections import create_collection, get_collection, list_collections
from service.pipeline.documents import BatchSummary, upsert_batch
from service.pipeline.ingest_files import describe_rejections, ingest_source, open_source, reason
from service.pipeline.keys import create_key, list_keys, revoke_key
from service.storage.schema import require_current, schema_status, upgrade
from service.storage.session import make_engine, make_session_factory

DEMO_DATABASE = "sqlite:///./tidemap-demo.db"
DEMO_COLLECTION = "harrowvale-herald"  # the invented newspaper of service/demo
DEMO_KEY_SCOPES = ("admin", "read")  # keys named demo-<scope>
MAX_LISTED_REJECTIONS = 20


def _shown(url: str) -> str:
    return make_url(url).render_as_string(hide_password=True)


def prepare_schema(engine: Engine, *, auto_upgrade: bool) -> None:
    """Leave a current schema alone; upgrade a fresh SQLite file (no tables at all) or,
    with ``auto_upgrade``, any database that is behind; else raise SchemaMismatchError."""
    status = schema_status(engine)
    if status.ok:
        return
    fresh_sqlite = engine.dialect.name == "sqlite" and not inspect(engine).get_table_names()
    if status.state == "behind" and (auto_upgrade or fresh_sqlite):
        upgrade(engine)
        return
    require_current(engine)


@contextmanager
def _database(settings: Settings, *, prepare: bool = True) -> Iterator[Engine]:
    """An engine for the command's duration (schema checked unless ``prepare`` is false)."""
    engine = make_engine(settings.database_url)
    try:
        if prepare:
            prepare_schema(engine, auto_upgrade=settings.auto_upgrade)
        yield engine
    finally:
        engine.dispose()


@contextmanager
def _session(settings: Settings) -> Iterator[Session]:
    with _database(settings) as engine, make_session_factory(engine)() as session:
        yield session


def _table(headers: Sequence[str], rows: Iterable[Sequence[Any]]) -> str:
    cells = [list(headers)] + [["" if v is None else str(v) for v in row] for row in rows]
    widths = [max(len(row[i]) for row in cells) for i in range(len(headers))]
    return "\n".join(
        "  ".join(v.ljust(w) for v, w in zip(row, widths, strict=True)).rstrip() for row in cells
    )


# --- serve -----------------------------------------------------------------------------


def cmd_serve(args: argparse.Namespace) -> int:
    overrides = {k: v for k, v in (("host", args.host), ("port", args.port)) if v is not None}
    settings = load_settings(**overrides)
    import uvicorn  # the web stack is imported only by the commands that serve

    from service.api.app import create_app
    from service.api.coalescing_writes import http_protocol
    from service.api.factory import single_threaded_blas
    from service.cli_build import embedded_worker

    log_level = settings.log_level.lower()
    # The schema is checked before anything starts; with SQLite one process is a whole
    # service: a worker thread runs the builds.
    with _database(settings) as engine, embedded_worker(settings, engine):
        if args.workers == 1:
            single_threaded_blas()
            app = create_app(settings, engine)
            uvicorn.run(
                app,
                host=settings.host,
                port=settings.port,
                log_level=log_level,
                http=http_protocol(),
            )
            return 0
        _serve_processes(settings, args.workers, log_level)
    return 0


def _serve_processes(settings: Settings, workers: int, log_level: str) -> None:
    from service.api.worker_pool import run_pool

    # Each worker process builds its own app and engine from the same environment; they
    # share the supervisor's listening socket and take turns by load (balanced_accept).
    run_pool(workers, settings.host, settings.port, log_level=log_level)


# --- db --------------------------------------------------------------------------------


def cmd_db_upgrade(args: argparse.Namespace) -> int:
    settings = load_settings()
    with _database(settings, prepare=False) as engine:
        before = schema_status(engine)
        if before.state == "ahead":
            require_current(engine)  # raises: upgrading cannot go backwards
        upgrade(engine, args.revision)
        after = schema_status(engine)
    print(
        f"{_shown(settings.database_url)}: schema {before.current or 'empty'} -> "
        f"{after.current} (head {after.head})"
    )
    return 0


def cmd_db_status(args: argparse.Namespace) -> int:
    settings = load_settings()
    with _database(settings, prepare=False) as engine:
        status = schema_status(engine)
    print(f"database: {_shown(settings.database_url)}")
    print(f"current:  {status.current or '(empty)'}")
    print(f"head:     {status.head}")
    print(f"state:    {status.state}")
    if status.state == "behind":
        print("run `tidemap db upgrade` to bring it up to date", file=sys.stderr)
    return 1 if args.check and not status.ok else 0


# --- keys ------------------------------------------------------------------------------


def cmd_keys_create(args: argparse.Namespace) -> int:
    with _session(load_settings()) as session:
        raw, info = create_key(session, args.name, args.scope)
    print(raw)  # alone on stdout, so `KEY=$(tidemap keys create ...)` works
    print(
        f"created key {info.id} {info.name!r} (scope {info.scope}, prefix {info.prefix}). "
        "The key is not stored and cannot be shown again: copy it now.",
        file=sys.stderr,
    )
    return 0


def cmd_keys_list(args: argparse.Namespace) -> int:
    with _session(load_settings()) as session:
        keys = list_keys(session)
    rows = [(k.id, k.name, k.prefix, k.scope, k.created_at, k.revoked_at or "-") for k in keys]
    print(_table(("id", "name", "prefix", "scope", "created", "revoked"), rows))
    return 0


def cmd_keys_revoke(args: argparse.Namespace) -> int:
    with _session(load_settings()) as session:
        info = revoke_key(session, args.id)
    print(f"key {info.id} {info.name!r} revoked at {info.revoked_at}")
    return 0


# --- collections -----------------------------------------------------------------------


def parse_setting(text: str, into: dict[str, Any]) -> None:
    """Add ``key=value`` to ``into``; the value is JSON if it parses, else a string, and a
    dotted key nests (``reindex.every_seconds=3600``)."""
    key, sep, value = text.partition("=")
    if not sep or not key.strip():
        raise argparse.ArgumentTypeError(f"--setting {text!r} is not key=value")
    try:
        parsed: Any = json.loads(value)
    except json.JSONDecodeError:
        parsed = value
    *parents, leaf = key.strip().split(".")
    node = into
    for part in parents:
        node = node.setdefault(part, {})
    node[leaf] = parsed


def cmd_collections_create(args: argparse.Namespace) -> int:
    settings: dict[str, Any] = {}
    for text in args.setting:
        parse_setting(text, settings)
    with _session(load_settings()) as session:
        view = create_collection(session, args.name, settings)
    print(json.dumps(view, indent=2))
    return 0


def cmd_collections_list(args: argparse.Namespace) -> int:
    with _session(load_settings()) as session:
        views = list_collections(session)
    rows = [(v["name"], v["documents"], v["terms"], v["changes"], v["created_at"]) for v in views]
    print(_table(("name", "documents", "terms", "changes", "created"), rows))
    return 0


# --- ingest ----------------------------------------------------------------------------


def _with_progress(
    items: Iterator[Any], total: int | None, quiet: bool, label: str
) -> Iterator[Any]:
    disable = quiet or not sys.stderr.isatty()
    with tqdm(total=total, unit="doc", desc=label, file=sys.stderr, disable=disable) as bar:
        for item in items:
            yield item
            bar.update(1)


def print_summary(summary: BatchSummary, where: Callable[[int], str], head: str) -> None:
    print(
        f"{head}: {summary.inserted} inserted, {summary.updated} updated, "
        f"{summary.unchanged} unchanged, {summary.rejected} rejected"
    )
    for line in describe_rejections(summary, where, limit=MAX_LISTED_REJECTIONS):
        print(f"  {line}")


def cmd_ingest(args: argparse.Namespace) -> int:
    settings = load_settings()
    source = open_source(args.path, args.format)
    started = time.perf_counter()
    with _session(settings) as session:
        summary = ingest_source(
            session,
            args.collection,
            source,
            create=args.create,
            max_text_bytes=settings.max_text_bytes,
            chunk_size=settings.ndjson_chunk_size,
            wrap=lambda items: _with_progress(items, source.total, args.quiet, args.collection),
        )
    seconds = time.perf_counter() - started
    head = f"{args.path} -> {args.collection!r} ({source.format}, {seconds:.1f} s)"
    print_summary(summary, source.where, head)
    return 1 if summary.rejected else 0


# --- demo ------------------------------------------------------------------------------


def build_demo_index(engine: Engine, collection: str) -> dict[str, Any]:
    """Build the demo collection's index in this process and wait for it to publish."""
    from service.cli_build import _run_until_finished, follow_build
    from service.pipeline.builds import enqueue_build
    from service.worker.worker import Worker, WorkerOptions

    settings = load_settings()
    factory = make_session_factory(engine)
    with factory() as session:
        job = enqueue_build(
            session, collection, trigger="cli", max_attempts=settings.build_max_attempts
        ).job
    worker = Worker(factory, WorkerOptions.from_settings(settings))
    runner = _run_until_finished(worker, factory, collection, job["id"])
    final = follow_build(factory, collection, job["id"], quiet=True, alive=runner.is_alive)
    runner.join()
    return final


def load_demo(engine: Engine, settings: Settings) -> tuple[BatchSummary, dict[str, str]]:
    """Upsert the invented archive into the demo collection (created if missing) and make
    fresh demo keys, revoking earlier ones (a raw key cannot be shown twice)."""
    records = articles_as_records(generate_archive())
    with make_session_factory(engine)() as session:
        try:
            get_collection(session, DEMO_COLLECTION)
        except NotFoundError:
            create_collection(session, DEMO_COLLECTION)
        summary = upsert_batch(
            session,
            DEMO_COLLECTION,
            enumerate(records, start=1),
            max_text_bytes=settings.max_text_bytes,
            chunk_size=settings.ndjson_chunk_size,
            report_all=False,
        )
        names = {f"demo-{scope}": scope for scope in DEMO_KEY_SCOPES}
        for old in list_keys(session):
            if old.name in names and old.revoked_at is None:
                revoke_key(session, old.id)
        keys = {scope: create_key(session, name, scope)[0] for name, scope in names.items()}
    return summary, keys


def map_page_url(base: str, collection: str, read_key: str) -> str:
    """The map page of ``collection``; the key rides in the fragment, which browsers do not
    send to the server."""
    from urllib.parse import quote

    return f"{base}/ui/map?collection={quote(collection)}#key={quote(read_key)}"


def open_when_listening(url: str, port: int, timeout: float = 15.0) -> None:
    """Open ``url`` in a browser once something listens on 127.0.0.1:``port``: uvicorn
    starts listening only after this returns. A daemon thread; gives up after ``timeout``."""
    import socket
    import threading
    import webbrowser

    def run() -> None:
        deadline = time.monotonic() + timeout
        while time.monotonic() < deadline:
            try:
                with socket.create_connection(("127.0.0.1", port), timeout=0.5):
                    webbrowser.open(url)
                    return
            except OSError:
                time.sleep(0.2)

    threading.Thread(target=run, name="open-map-page", daemon=True).start()


def cmd_demo(args: argparse.Namespace) -> int:
    # The demo database is the demo's own: bring it up to date whatever its state.
    settings = load_settings(
        database_url=args.database, host="127.0.0.1", port=args.port, auto_upgrade=True
    )
    with _database(settings) as engine:
        summary, keys = load_demo(engine, settings)
        print_summary(summary, lambda i: f"article {i}", f"demo archive -> {DEMO_COLLECTION!r}")
        build = build_demo_index(engine, DEMO_COLLECTION)
        print(f"index:      build {build['id']} {build['state']}", file=sys.stderr)
        url = f"http://127.0.0.1:{settings.port}"
        print(f"database:   {_shown(settings.database_url)}")
        print(f"collection: {DEMO_COLLECTION}")
        print(f"admin key:  {keys['admin']}")
        print(f"read key:   {keys['read']}")
        print("(keys are not stored and cannot be shown again; earlier demo keys are revoked)")
        print(f"API:        {url}/docs")
        print(f"try:        curl -H 'Authorization: Bearer {keys['read']}' {url}/v1/collections")
        print(f"map:        {map_page_url(url, DEMO_COLLECTION, keys['read'])}")
        if args.no_serve:
            return 0
        import uvicorn

        from service.api.app import create_app
        from service.api.coalescing_writes import http_protocol
        from service.api.factory import single_threaded_blas

        if args.open:
            open_when_listening(map_page_url(url, DEMO_COLLECTION, keys["read"]), settings.port)
        single_threaded_blas()  # the build is done; from here on this process answers queries
        app = create_app(settings, engine)
        uvicorn.run(app, host="127.0.0.1", port=settings.port, http=http_protocol())
    return 0


# --- bench -----------------------------------------------------------------------------


def cmd_bench_ingest(args: argparse.Namespace) -> int:
    from service.bench.ingest import format_report, run_ingest_benchmark

    report = run_ingest_benchmark(
        n_docs=args.docs, database_url=args.database, seed=args.seed, progress=print_progress
    )
    print(json.dumps(report, indent=2) if args.json else format_report(report))
    return 0


def cmd_bench_build(args: argparse.Namespace) -> int:
    from pathlib import Path

    if args.from_database:
        from service.bench.build_db import run_build_benchmark as run_from_database

        report = run_from_database(
            n_docs=args.docs, database_url=args.database, seed=args.seed, geometry="real"
        )
        print(json.dumps(report) if args.json else json.dumps(report, indent=2))
        return 0
    from service.bench.build import format_report, run_build_benchmark

    source = None if args.input is None else Path(args.input)
    if source is not None and not source.is_file():
        raise argparse.ArgumentTypeError(f"--input {source} is not a file")
    report = run_build_benchmark(
        args.docs,
        input_path=source,
        compare=args.compare,
        seed=args.seed,
        progress=print_progress,
    )
    print(json.dumps(report) if args.json else format_report(report))
    return 0


def cmd_bench_query(args: argparse.Namespace) -> int:
    from service.bench.query import ENDPOINT_NAMES, LoadOptions, format_report, run_query_benchmark

    endpoints = ENDPOINT_NAMES if args.endpoints is None else tuple(args.endpoints.split(","))
    unknown = set(endpoints) - set(ENDPOINT_NAMES)
    if unknown:
        known = ", ".join(ENDPOINT_NAMES)
        raise argparse.ArgumentTypeError(
            f"--endpoints: {', '.join(sorted(unknown))} not in {known}"
        )
    if args.reuse and args.database is None:
        raise argparse.ArgumentTypeError("--reuse needs --database (a file or URL to keep)")
    options = LoadOptions(args.concurrency, args.seconds, args.warmup_seconds, args.seed)
    report = run_query_benchmark(
        n_docs=args.docs,
        database_url=args.database,
        reuse=args.reuse,
        endpoints=endpoints,
        options=options,
        server_workers=args.server_workers,
        loop=args.loop,
        http=args.http,
        progress=print_progress,
    )
    print(json.dumps(report) if args.json else format_report(report))
    return 0


def cmd_bench_map(args: argparse.Namespace) -> int:
    from service.bench.map_export import format_report, run_map_benchmark

    report = run_map_benchmark(args.docs, seed=args.seed)
    print(json.dumps(report) if args.json else format_report(report))
    return 0


def print_progress(message: str) -> None:
    print(message, file=sys.stderr, flush=True)


# --- the parser ------------------------------------------------------------------------


def _positive(text: str) -> int:
    value = int(text)
    if value < 1:
        raise argparse.ArgumentTypeError(f"must be at least 1, got {value}")
    return value


def _positive_float(text: str) -> float:
    value = float(text)
    if not value > 0:
        raise argparse.ArgumentTypeError(f"must be more than 0, got {value}")
    return value


def _port(text: str) -> int:
    value = int(text)
    if not 1 <= value <= 65535:
        raise argparse.ArgumentTypeError(f"a port is between 1 and 65535, got {value}")
    return value


MAX_DEFAULT_SERVER_WORKERS = 4  # each worker holds its own copy of the index


def default_server_workers() -> int:
    """`bench query` measures the server as it should run on this machine: one API
    process per core (one process answers on one core), within a memory-minded cap."""
    try:
        cores = len(os.sched_getaffinity(0))
    except AttributeError:  # pragma: no cover - not Linux
        cores = os.cpu_count() or 1
    return max(1, min(MAX_DEFAULT_SERVER_WORKERS, cores))


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="tidemap",
        description="A map of what a text archive is about. Settings come from TIDEMAP_* "
        "environment variables (TIDEMAP_DATABASE_URL, default sqlite:///./tidemap.db).",
        epilog="Exit codes: 0 ok, 1 failed or documents rejected, 2 usage or schema mismatch.",
    )
    sub = parser.add_subparsers(title="commands", metavar="COMMAND")

    def command(parent: Any, name: str, handler: Callable[..., int], text: str) -> Any:
        p = parent.add_parser(name, help=text, description=text)
        p.set_defaults(handler=handler)
        return p

    def group(name: str, text: str) -> Any:
        p = sub.add_parser(name, help=text, description=text)
        p.set_defaults(handler=lambda _args, p=p: (p.print_help(), 2)[1])
        return p.add_subparsers(title="commands", metavar="COMMAND")

    p = command(sub, "serve", cmd_serve, "Run the HTTP API (uvicorn).")
    p.add_argument("--host", help="interface to listen on (default TIDEMAP_HOST, 127.0.0.1)")
    p.add_argument("--port", type=_port, help="port (default TIDEMAP_PORT, 8000)")
    p.add_argument("--workers", type=_positive, default=1, help="worker processes (default 1)")

    db = group("db", "Database schema: status and upgrades.")
    p = command(db, "upgrade", cmd_db_upgrade, "Upgrade the schema (to the newest by default).")
    p.add_argument("--revision", default="head", help="target revision (default head)")
    p = command(db, "status", cmd_db_status, "Show the schema revision: current, head, state.")
    p.add_argument("--check", action="store_true", help="exit 1 unless the schema is current")

    keys = group("keys", "API keys: create (shown once), list, revoke.")
    p = command(keys, "create", cmd_keys_create, "Create a key and print it once.")
    p.add_argument("--name", required=True, help="what the key is for")
    p.add_argument("--scope", required=True, choices=("read", "write", "admin"))
    command(keys, "list", cmd_keys_list, "List keys (never the keys themselves).")
    p = command(keys, "revoke", cmd_keys_revoke, "Revoke a key by its id.")
    p.add_argument("id", type=int, help="the key's id (see `tidemap keys list`)")

    colls = group("collections", "Collections of documents.")
    p = command(colls, "create", cmd_collections_create, "Create a collection.")
    p.add_argument("name", help="1-64 characters of a-z, 0-9, _ and -")
    p.add_argument(
        "--setting",
        action="append",
        default=[],
        metavar="KEY=VALUE",
        help="a collection setting (value as JSON, else text; dotted keys nest), repeatable",
    )
    command(colls, "list", cmd_collections_list, "List collections.")

    p = command(sub, "ingest", cmd_ingest, "Load documents from a JSONL or CSV file or a folder.")
    p.epilog = (
        "JSONL: one document object per line. CSV: a header naming id and text (title and "
        "published_at optional, other columns go into metadata). Folder: every .txt/.md "
        "file; the id is the relative path with / as ~, the title its first line. Bad "
        "lines, rows or files are reported by position and skipped; the exit code is 1 "
        "when any was rejected."
    )
    p.add_argument("path", help="a .jsonl/.csv file, or a folder of .txt/.md files")
    p.add_argument("--collection", required=True, help="the target collection")
    p.add_argument("--create", action="store_true", help="create the collection if missing")
    p.add_argument(
        "--format",
        default="auto",
        choices=("auto", "jsonl", "csv", "text"),
        help="default: from the file name (.jsonl/.ndjson, .csv/.tsv) or text for a folder",
    )
    p.add_argument("--quiet", action="store_true", help="no progress bar")

    p = command(sub, "demo", cmd_demo, "Load an invented archive and serve it on 127.0.0.1.")
    p.add_argument("--port", type=_port, default=8000, help="port (default 8000)")
    p.add_argument("--no-serve", action="store_true", help="load and print the keys, then exit")
    p.add_argument(
        "--open", action="store_true", help="open the map page in a browser once it is served"
    )
    p.add_argument("--database", default=DEMO_DATABASE, help=f"default {DEMO_DATABASE}")

    bench = group("bench", "Benchmarks (speed, not quality).")
    p = command(bench, "ingest", cmd_bench_ingest, "Time ingestion through a real HTTP server.")
    p.epilog = (
        "Starts uvicorn on 127.0.0.1 against the database and sends invented ~1 KB "
        "documents as JSON lists and as one NDJSON stream, into the collections bench-json "
        "and bench-ndjson (replaced if present)."
    )
    p.add_argument(
        "--docs", type=_positive, default=20_000, help="documents per path (default 20000)"
    )
    p.add_argument("--database", help="SQLAlchemy URL (default a temporary SQLite file)")
    p.add_argument("--seed", type=int, default=0, help="seed of the invented text (default 0)")
    p.add_argument("--json", action="store_true", help="print one JSON object")
    p = command(bench, "build", cmd_bench_build, "Time the geometry of a build, no database.")
    p.epilog = (
        "Weighting, k-NN graph, spectrum and groups of invented term counts (or of the "
        "first --docs documents of a JSONL file with text and optional title), at the "
        "default map settings. Input preparation is timed apart. Peak RSS is the process's."
    )
    p.add_argument("--docs", type=_positive, default=10_000, help="documents (default 10000)")
    p.add_argument("--input", metavar="FILE.jsonl", help="a JSONL file instead of invented counts")
    p.add_argument(
        "--compare",
        action="store_true",
        help="also time scikit-learn's spectral_embedding on the largest component",
    )
    p.add_argument("--seed", type=int, default=0, help="seed of the invented counts (default 0)")
    p.add_argument(
        "--from-database",
        action="store_true",
        help="store the documents first, then time the whole build from the database "
        "(load, geometry, store, publish) and loading the published version",
    )
    p.add_argument("--database", help="with --from-database: a database URL (default: temp SQLite)")
    p.add_argument("--json", action="store_true", help="print one JSON object")
    p = command(bench, "query", cmd_bench_query, "Query latency per endpoint under load.")
    p.epilog = (
        "Stores --docs invented documents in the collection bench-query (replaced) and builds "
        "its index, starts uvicorn on 127.0.0.1 with a read key, then loads each endpoint "
        "(neighbors, similar, distance, clusters, document, index; those the server does not "
        "serve are skipped) from another process: --concurrency keep-alive connections for "
        "--seconds after a warm-up. Prints requests, errors, rps, p50_ms and p99_ms per "
        "endpoint. Storing and building 100,000 documents takes a few minutes: with --reuse "
        "and --database, a database that already holds them with an index is used as it is."
    )
    p.add_argument("--docs", type=_positive, default=100_000, help="documents (default 100000)")
    p.add_argument(
        "--database",
        "--database-url",
        dest="database",
        help="SQLAlchemy URL (default a temporary SQLite file)",
    )
    p.add_argument(
        "--reuse",
        action="store_true",
        help="with --database: skip storing and building when bench-query already holds "
        "the same --docs documents (same --seed) with a published index",
    )
    p.add_argument(
        "--seconds", type=_positive_float, default=10.0, help="per endpoint (default 10)"
    )
    p.add_argument(
        "--concurrency", type=_positive, default=32, help="open connections (default 32)"
    )
    p.add_argument(
        "--warmup-seconds",
        type=float,
        default=2.0,
        help="load before the measured phase, per endpoint (default 2)",
    )
    p.add_argument(
        "--server-workers",
        type=_positive,
        default=default_server_workers(),
        help="API worker processes, as `serve --workers` (default one per core this "
        f"process may use, at most {MAX_DEFAULT_SERVER_WORKERS}: here "
        f"{default_server_workers()})",
    )
    p.add_argument("--endpoints", metavar="A,B", help="a comma-separated subset (default all)")
    p.add_argument(
        "--loop",
        choices=("auto", "asyncio", "uvloop"),
        default="auto",
        help="uvicorn --loop (default auto: uvloop if installed)",
    )
    p.add_argument(
        "--http",
        choices=("auto", "h11", "httptools"),
        default="auto",
        help="uvicorn --http (default auto: httptools if installed)",
    )
    p.add_argument("--seed", type=int, default=0, help="seed of the invented text (default 0)")
    p.add_argument("--json", action="store_true", help="print one JSON object")
    p = command(bench, "map", cmd_bench_map, "Time writing the whole map, no database.")
    p.epilog = (
        "Writes GET .../map answers (JSON and CSV, 2 and 3 dims, the default t and t=3) "
        "from an invented index of --docs documents held in memory, every byte consumed "
        "and dropped. Prints seconds, body bytes and the peak memory Python allocated "
        "above the index per case, for the first answer (which fills the per-component "
        "caches the queries share) and for the repeats."
    )
    p.add_argument("--docs", type=_positive, default=100_000, help="documents (default 100000)")
    p.add_argument("--seed", type=int, default=0, help="seed of the invented index (default 0)")
    p.add_argument("--json", action="store_true", help="print one JSON object")
    from service.cli_build import register

    register(sub)
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    handler = getattr(args, "handler", None)
    if handler is None:
        parser.print_help()
        return 2
    try:
        return int(handler(args))
    except SchemaMismatchError as exc:
        print(f"tidemap: {exc.message}", file=sys.stderr)
        return 2
    except TidemapError as exc:
        print(f"tidemap: error: {reason(exc.to_dict())}", file=sys.stderr)
        return 1
    except argparse.ArgumentTypeError as exc:
        print(f"tidemap: error: {exc}", file=sys.stderr)
        return 2
    except ValidationError as exc:
        print(f"tidemap: invalid TIDEMAP_* setting: {exc}", file=sys.stderr)
        return 2
    except ArgumentError as exc:  # an unparsable URL or an unknown driver
        print(f"tidemap: invalid TIDEMAP_DATABASE_URL: {exc}", file=sys.stderr)
        return 2
    except OperationalError as exc:
        print(f"tidemap: error: the database cannot be reached: {exc.orig}", file=sys.stderr)
        return 1
    except KeyboardInterrupt:
        return 130


if __name__ == "__main__":
    raise SystemExit(main())
