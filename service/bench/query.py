"""Query latency under load through a real server: ``tidemap bench query``.

1. N invented documents (``service.bench.build_db.invented_texts``) are stored in the
   collection ``bench-query`` (replaced if present) and one real build is run
   (``store_and_build``); the generator makes N + 200 documents and the last 200 are not
   stored: they are the drafts sent to ``similar``, texts like the archive's but not in
   it. With ``reuse`` a database that already holds the same N documents with a
   published index skips storing and building.
2. A read key is created and a uvicorn server (W worker processes as ``tidemap serve
   --workers W`` runs them, no embedded worker) is started on 127.0.0.1
   (``service.bench.ingest.running_server``).
3. For each endpoint of ENDPOINTS the server serves (read from its OpenAPI document),
   one request is sent alone (its time is ``first_ms``: with TIDEMAP_PRELOAD_INDEXES
   off, the first query of a process loads the index version),
   then another process (``service.bench.load_client``) runs a warm-up and the measured
   closed loop of ``concurrency`` keep-alive connections for ``seconds``.

Measures speed, never the answers' quality. Server CPU and peak resident memory are
read from /proc for the server process and its children (the workers when W > 1).
"""

from __future__ import annotations

import json
import os
import random
import subprocess
import sys
import tempfile
from collections.abc import Callable, Iterator, Sequence
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path
from typing import Any
from urllib.parse import quote, urlencode

import httpx
import numpy as np
from sqlalchemy import func, select
from sqlalchemy.engine import make_url
from sqlalchemy.orm import Session, sessionmaker

from service.bench.build_db import invented_texts, store_and_build
from service.bench.ingest import running_server
from service.bench.load_client import START_LINE, LoadSpec
from service.bench.query_server import (
    served_routes,
    server_stack,
    tree_cpu_seconds,
    tree_peak_rss_mb,
    uvicorn_args,
    wait_ready,
)
from service.errors import SchemaMismatchError
from service.pipeline.index_content_types import DOC_IDS
from service.pipeline.keys import create_key, revoke_key
from service.storage import index_store
from service.storage.models import Collection, Document
from service.storage.schema import schema_status, upgrade
from service.storage.session import make_engine, make_session_factory

COLLECTION = "bench-query"
N_DRAFTS = 200  # invented with the stored documents, not stored
N_TARGETS = 1000  # distinct requests built per endpoint
N_QUERY_IDS = 2000  # mapped documents whose ids the requests draw from
FIRST_REQUEST_SECONDS = 60.0  # the first query may load the index version
KEY_NAME = "bench-query"
Progress = Callable[[str], None]
Body = dict[str, Any] | None


@dataclass(frozen=True)
class Inputs:
    collection: str
    ids: Sequence[str]  # external ids of mapped documents
    drafts: Sequence[str]  # texts not in the archive


def _base(inputs: Inputs) -> str:
    return f"/v1/collections/{quote(inputs.collection, safe='')}"


def _doc(inputs: Inputs, rng: random.Random) -> str:
    return quote(rng.choice(inputs.ids), safe="")


def _neighbors(inputs: Inputs, rng: random.Random) -> tuple[str, Body]:
    return f"{_base(inputs)}/documents/{_doc(inputs, rng)}/neighbors?k=10", None


def _similar(inputs: Inputs, rng: random.Random) -> tuple[str, Body]:
    return f"{_base(inputs)}/similar", {"text": rng.choice(inputs.drafts), "k": 10}


def _distance(inputs: Inputs, rng: random.Random) -> tuple[str, Body]:
    pair = urlencode({"from": rng.choice(inputs.ids), "to": rng.choice(inputs.ids)})
    return f"{_base(inputs)}/distance?{pair}", None


def _clusters(inputs: Inputs, rng: random.Random) -> tuple[str, Body]:
    return f"{_base(inputs)}/clusters", None


def _document(inputs: Inputs, rng: random.Random) -> tuple[str, Body]:
    return f"{_base(inputs)}/documents/{_doc(inputs, rng)}", None


def _index(inputs: Inputs, rng: random.Random) -> tuple[str, Body]:
    return f"{_base(inputs)}/index", None


@dataclass(frozen=True)
class Endpoint:
    name: str
    method: str
    route: str  # its OpenAPI path with every parameter written {}
    target: Callable[[Inputs, random.Random], tuple[str, Body]]  # path + query, JSON body


# The endpoints loaded, in order; one the server does not serve is reported as skipped.
# "document" and "index" read the database only: a floor for the query endpoints.
ENDPOINTS: tuple[Endpoint, ...] = (
    Endpoint("neighbors", "GET", "/v1/collections/{}/documents/{}/neighbors", _neighbors),
    Endpoint("similar", "POST", "/v1/collections/{}/similar", _similar),
    Endpoint("distance", "GET", "/v1/collections/{}/distance", _distance),
    Endpoint("clusters", "GET", "/v1/collections/{}/clusters", _clusters),
    Endpoint("document", "GET", "/v1/collections/{}/documents/{}", _document),
    Endpoint("index", "GET", "/v1/collections/{}/index", _index),
)
ENDPOINT_NAMES = tuple(e.name for e in ENDPOINTS)


def request_bytes(method: str, target: str, body: Body, *, host: str, key: str) -> bytes:
    """One whole HTTP/1.1 request, keep-alive by default."""
    head = [f"{method} {target} HTTP/1.1", f"Host: {host}", f"Authorization: Bearer {key}"]
    payload = b"" if body is None else json.dumps(body).encode("utf-8")
    if body is not None:
        head += ["Content-Type: application/json", f"Content-Length: {len(payload)}"]
    return ("\r\n".join(head) + "\r\n\r\n").encode("latin-1") + payload


# --- the data ------------------------------------------------------------------------------


def _reusable(factory: sessionmaker[Session], n_docs: int, first_text: str) -> bool:
    """The collection holds n_docs documents, the first one as invented, and an index."""
    with factory() as session:
        coll = session.scalars(select(Collection).where(Collection.name == COLLECTION)).first()
        if coll is None or coll.active_version_id is None:
            return False
        in_collection = Document.collection_id == coll.id
        count = session.scalar(select(func.count()).select_from(Document).where(in_collection))
        first = session.scalar(
            select(Document.text).where(in_collection, Document.external_id == "b0000000")
        )
        return count == n_docs and first == first_text


def prepare_collection(
    factory: sessionmaker[Session], *, n_docs: int, seed: int, reuse: bool, say: Progress
) -> tuple[list[str], dict[str, Any]]:
    """Store and build (unless reusable); returns the drafts and what was done."""
    say(f"inventing {n_docs} + {N_DRAFTS} documents (seed {seed})")
    docs = invented_texts(n_docs + N_DRAFTS, seed)
    drafts = [d["text"] for d in docs[n_docs:]]
    del docs[n_docs:]
    if reuse and _reusable(factory, n_docs, docs[0]["text"]):
        say(f"reusing the index of {COLLECTION!r}")
        return drafts, {"reused": True}
    # Hand the list over without keeping a reference, so it is freed before the build.
    pending = [docs]
    del docs
    stored = store_and_build(factory, COLLECTION, pending.pop(), say=say)
    return drafts, {
        "reused": False,
        "seconds_ingest": round(stored.seconds_ingest, 2),
        "seconds_build": round(stored.seconds_build, 2),
    }


def mapped_ids(factory: sessionmaker[Session], n: int, seed: int) -> tuple[int, list[str]]:
    """The active version's number and the external ids of ``n`` of its documents."""
    with factory() as session:
        coll = session.scalars(select(Collection).where(Collection.name == COLLECTION)).one()
        conn = session.connection()
        version_id = int(coll.active_version_id or 0)
        number = int(index_store.version_row(conn, version_id).number)
        doc_ids = index_store.load_arrays(conn, version_id, [DOC_IDS])[DOC_IDS]
        rng = np.random.default_rng(seed)
        picked = rng.choice(doc_ids, size=min(n, doc_ids.size), replace=False).tolist()
        ids: list[str] = []
        for start in range(0, len(picked), 500):  # well below SQLite's parameter limit
            chunk = picked[start : start + 500]
            ids += session.scalars(select(Document.external_id).where(Document.id.in_(chunk)))
    return number, sorted(ids)


@contextmanager
def read_key(factory: sessionmaker[Session]) -> Iterator[str]:
    """A read key for the run, revoked afterwards."""
    with factory() as session:
        raw, info = create_key(session, KEY_NAME, "read")
    try:
        yield raw
    finally:
        with factory() as session:
            revoke_key(session, info.id)


# --- the load ------------------------------------------------------------------------------


@dataclass(frozen=True)
class LoadOptions:
    concurrency: int = 32
    seconds: float = 10.0
    warmup_seconds: float = 2.0
    seed: int = 0


def run_client(spec: LoadSpec, server_pid: int, log: Path) -> dict[str, Any]:
    """Run the load generator in its own process; adds the server's CPU seconds in the
    measured phase (from the client's start line to its result)."""
    with (
        log.open("ab") as err,
        subprocess.Popen(
            [sys.executable, "-m", "service.bench.load_client"],
            stdin=subprocess.PIPE,
            stdout=subprocess.PIPE,
            stderr=err,
        ) as proc,
    ):
        assert proc.stdin is not None and proc.stdout is not None
        proc.stdin.write(spec.to_json().encode())
        proc.stdin.close()
        first = proc.stdout.readline().decode().strip()
        cpu_before = tree_cpu_seconds(server_pid)
        last = proc.stdout.readline().decode().strip()
        cpu_after = tree_cpu_seconds(server_pid)
        code = proc.wait()
    if first != START_LINE or code != 0:
        raise RuntimeError(f"the load client failed ({code}): {log.read_text()[-2000:]}")
    result: dict[str, Any] = json.loads(last)
    used = {pid: cpu - cpu_before.get(pid, 0.0) for pid, cpu in cpu_after.items()}
    result["server_cpu_seconds"] = round(sum(used.values()), 3)
    if len(used) > 1:
        # Several workers: the kernel spreads connections over them when accepted, not
        # per request, so an uneven split shows here (in pid order, supervisor included).
        result["server_cpu_seconds_by_process"] = [round(used[pid], 3) for pid in sorted(used)]
    return result


class EndpointFailedError(Exception):
    """An endpoint that cannot be loaded; the report says why."""


def measure_endpoint(
    endpoint: Endpoint,
    inputs: Inputs,
    base: str,
    key: str,
    pid: int,
    options: LoadOptions,
    log: Path,
) -> dict[str, Any]:
    """One request alone, then the load from another process; the endpoint's result."""
    rng = random.Random(f"{options.seed}-{endpoint.name}")
    host = base.removeprefix("http://")
    targets = [endpoint.target(inputs, rng) for _ in range(N_TARGETS)]
    target, body = targets[0]
    try:
        first = httpx.request(
            endpoint.method,
            base + target,
            json=body,
            headers={"Authorization": f"Bearer {key}"},
            timeout=FIRST_REQUEST_SECONDS,
        )
    except httpx.TransportError as exc:
        # No answer at all (a hung route): loading it would only collect timeouts.
        raise EndpointFailedError(f"the first request got no answer: {type(exc).__name__}") from exc
    spec = LoadSpec(
        host="127.0.0.1",
        port=int(host.rpartition(":")[2]),
        requests=[request_bytes(endpoint.method, t, b, host=host, key=key) for t, b in targets],
        concurrency=options.concurrency,
        seconds=options.seconds,
        warmup_seconds=options.warmup_seconds,
        warmup_timeout=FIRST_REQUEST_SECONDS,
        seed=options.seed,
    )
    result = run_client(spec, pid, log)
    result["first_status"] = first.status_code
    result["first_ms"] = round(first.elapsed.total_seconds() * 1000, 1)
    if not first.is_success:
        result["first_error"] = first.text[:500]
    return result


def run_query_benchmark(
    *,
    n_docs: int,
    database_url: str | None = None,
    reuse: bool = False,
    endpoints: Sequence[str] = ENDPOINT_NAMES,
    options: LoadOptions | None = None,
    server_workers: int = 1,
    loop: str = "auto",
    http: str = "auto",
    progress: Progress | None = None,
) -> dict[str, Any]:
    """Store, build, serve and load; returns the report (see ``format_report``)."""
    unknown = set(endpoints) - set(ENDPOINT_NAMES)
    if unknown:
        raise ValueError(f"unknown endpoints {sorted(unknown)}; known: {list(ENDPOINT_NAMES)}")
    if reuse and database_url is None:
        raise ValueError("reuse needs a database that outlives the run")
    options = options or LoadOptions()
    say = progress or (lambda _m: None)
    stack = server_stack(loop, http)
    with tempfile.TemporaryDirectory(prefix="tidemap-bench-query-") as tmp:
        url = database_url or f"sqlite:///{Path(tmp) / 'bench.db'}"
        engine = make_engine(url)
        try:
            status = schema_status(engine)
            if status.state == "ahead":
                raise SchemaMismatchError(f"the schema {status.current} is newer than this code")
            if status.state == "behind":
                upgrade(engine)
            factory = make_session_factory(engine)
            drafts, build = prepare_collection(
                factory, n_docs=n_docs, seed=options.seed, reuse=reuse, say=say
            )
            version, ids = mapped_ids(factory, N_QUERY_IDS, options.seed)
            inputs = Inputs(COLLECTION, ids, drafts)
            report: dict[str, Any] = {
                "docs": n_docs,
                "version": version,
                "concurrency": options.concurrency,
                "seconds": options.seconds,
                "server_workers": server_workers,
                "endpoints": {},
                "skipped_endpoints": [],  # not served
                "failed_endpoints": {},  # served, but the first request got no answer
                "peak_rss_mb_server": None,
                "database": make_url(url).get_backend_name(),
                "server": stack,
                "cpus": os.cpu_count(),
                "load_average_before": round(os.getloadavg()[0], 2),
                "build": build,
            }
            with read_key(factory) as key:
                env = {"TIDEMAP_EMBEDDED_WORKER": "off"}
                args = uvicorn_args(stack)
                with running_server(
                    url, Path(tmp), uvicorn_args=args, env=env, workers=server_workers
                ) as (proc, base):
                    wait_ready(base, key)
                    served = served_routes(base)
                    client_log = Path(tmp) / "client.log"
                    for endpoint in ENDPOINTS:
                        if endpoint.name not in endpoints:
                            continue
                        if (endpoint.method, endpoint.route) not in served:
                            say(f"{endpoint.name}: not served, skipped")
                            report["skipped_endpoints"].append(endpoint.name)
                            continue
                        say(f"{endpoint.name}: {options.seconds} s at {options.concurrency}")
                        try:
                            result = measure_endpoint(
                                endpoint, inputs, base, key, proc.pid, options, client_log
                            )
                        except EndpointFailedError as exc:
                            say(f"{endpoint.name}: {exc}")
                            report["failed_endpoints"][endpoint.name] = str(exc)
                            continue
                        report["endpoints"][endpoint.name] = result
                        say(f"{endpoint.name}: p99 {result['p99_ms']} ms, {result['rps']} rps")
                    report["peak_rss_mb_server"] = tree_peak_rss_mb(proc.pid)
        finally:
            engine.dispose()
    return report


def format_report(report: dict[str, Any]) -> str:
    """A readable table of the report."""
    stack = report["server"]
    lines = [
        f"{report['docs']} documents ({report['database']}), index version {report['version']}, "
        f"{report['concurrency']} connections, {report['seconds']} s per endpoint, "
        f"{report['server_workers']} server worker(s) ({stack['loop']}, {stack['http']})",
        f"{'endpoint':<10} {'requests':>9} {'errors':>7} {'rps':>8} {'p50 ms':>8} "
        f"{'p99 ms':>8} {'server CPU s':>13} {'client CPU s':>13}",
    ]
    for name, r in report["endpoints"].items():
        lines.append(
            f"{name:<10} {r['requests']:>9} {r['errors']:>7} {r['rps']!s:>8} "
            f"{r['p50_ms']!s:>8} {r['p99_ms']!s:>8} {r['server_cpu_seconds']:>13} "
            f"{r['client_cpu_seconds']:>13}"
        )
    if report["skipped_endpoints"]:
        lines.append(f"not served: {', '.join(report['skipped_endpoints'])}")
    for name, reason in report["failed_endpoints"].items():
        lines.append(f"{name}: {reason}")
    lines.append(f"peak server RSS: {report['peak_rss_mb_server']} MiB")
    return "\n".join(lines)
