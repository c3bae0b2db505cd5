"""Ingestion speed through the real HTTP stack: ``tidemap bench ingest``.

A uvicorn server runs in a subprocess on 127.0.0.1 against the given database; the
benchmark sends the same invented documents once as JSON lists of ``max_batch_items``
and once as a single streamed NDJSON request, each into its own collection
(``bench-json`` and ``bench-ndjson``, replaced if they exist) and each against a fresh
server process, so the server's peak resident memory (``VmHWM``) belongs to one path.
Request bodies are encoded before the clock starts, so the time is the server's.

The text measures speed, not quality: about 1 KB per document drawn from a Zipfian
vocabulary (the most frequent ranks are common English function words, which the
tokenizer drops as stop words; the rest are invented words, shorter the more frequent).
"""

from __future__ import annotations

import json
import os
import socket
import subprocess
import sys
import tempfile
import time
from collections.abc import Callable, Iterator, Mapping, Sequence
from contextlib import contextmanager
from pathlib import Path
from typing import Any

import httpx
import numpy as np
from sqlalchemy import Engine, create_engine, text
from sqlalchemy.engine import make_url
from sqlalchemy.pool import NullPool

from service.config import load_settings
from service.errors import NotFoundError, SchemaMismatchError
from service.pipeline.collections import create_collection, delete_collection
from service.pipeline.keys import create_key, list_keys, revoke_key
from service.storage.schema import schema_status, upgrade
from service.storage.session import make_engine, make_session_factory

COLLECTIONS = {"json_batch": "bench-json", "ndjson": "bench-ndjson"}
# Word lists written as strings for legibility.
FUNCTION_WORDS = (  # noqa: SIM905
    "the of and to in a is that for it as was with be by on not he this are or his from "
    "at which but have an they you were her she there been one all we their has would "
    "when if so no will more can who its than about said into up out then them these"
).split()
_ONSETS = "b c d f g h k l m n p r s t v w z br cr dr fl gr pl st tr sh ch th".split()  # noqa: SIM905
_VOWELS = ["a", "e", "i", "o", "u", "ai", "ea", "ou", "io"]
_CODAS = ["", "", "", "n", "r", "s", "l", "t", "nd", "st", "m"]
STREAM_PIECE = 64 * 1024

Progress = Callable[[str], None]


def invented_vocabulary(n_words: int, rng: np.random.Generator) -> list[str]:
    """``n_words`` distinct words by frequency rank: function words, then invented ones
    of 1-4 syllables (more syllables further down the ranks, as in natural language)."""
    words = list(FUNCTION_WORDS[:n_words])
    seen = set(words)
    while len(words) < n_words:
        rank = len(words)
        n_syllables = 1 + min(3, int(rng.exponential(0.4 + 2.0 * rank / n_words)))
        word = (
            "".join(
                _ONSETS[rng.integers(len(_ONSETS))] + _VOWELS[rng.integers(len(_VOWELS))]
                for _ in range(n_syllables)
            )
            + _CODAS[rng.integers(len(_CODAS))]
        )
        if word not in seen:
            seen.add(word)
            words.append(word)
    return words


def invented_documents(
    n_docs: int, *, seed: int = 0, vocab_size: int = 5000, target_bytes: int = 1000
) -> list[dict[str, Any]]:
    """``n_docs`` documents in the upsert shape, about ``target_bytes`` of text each.

    Word ranks follow a Zipf-Mandelbrot law p(r) ~ (r + 2.7)^-1.05 (common practice for
    English word frequencies); sentences hold 6-22 words.
    """
    if n_docs < 1:
        raise ValueError(f"n_docs must be at least 1, got {n_docs}")
    rng = np.random.default_rng(seed)
    vocab = invented_vocabulary(vocab_size, rng)
    weights = (np.arange(vocab_size) + 2.7) ** -1.05
    mean_len = float(np.dot(weights / weights.sum(), [len(w) + 1 for w in vocab]))
    per_doc = int(target_bytes / mean_len * 1.15) + 30
    draws = rng.choice(vocab_size, size=n_docs * per_doc, p=weights / weights.sum()).tolist()
    sentence_lengths = rng.integers(6, 23, size=n_docs * per_doc // 6 + 1).tolist()
    docs: list[dict[str, Any]] = []
    w = s = 0
    for i in range(n_docs):
        title_words = [vocab[draws[(w + k) % len(draws)]] for k in range(3 + i % 6)]
        w += len(title_words)
        sentences: list[str] = []
        size = 0
        while size < target_bytes:
            n = sentence_lengths[s]
            s += 1
            words = [vocab[draws[(w + k) % len(draws)]] for k in range(n)]
            w += n
            sentence = " ".join(words).capitalize() + "."
            sentences.append(sentence)
            size += len(sentence) + 1
        docs.append(
            {
                "id": f"bench-{i:07d}",
                "title": " ".join(title_words).title(),
                "text": " ".join(sentences),
                "published_at": f"20{10 + i % 15:02d}-{1 + i % 12:02d}-{1 + i % 28:02d}",
                "metadata": {"n": i, "desk": ("news", "sport", "culture")[i % 3]},
            }
        )
    return docs


def _free_port() -> int:
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as sock:
        sock.bind(("127.0.0.1", 0))
        return int(sock.getsockname()[1])


def _proc_status_mb(pid: int, field: str) -> float | None:
    """A memory line of /proc/<pid>/status (VmHWM: peak resident set) in MiB."""
    try:
        for line in Path(f"/proc/{pid}/status").read_text().splitlines():
            if line.startswith(field + ":"):
                return round(int(line.split()[1]) / 1024, 1)
    except OSError:
        return None
    return None


def _cpu_seconds(pid: int) -> float | None:
    """User + system CPU time of a process and all its threads, from /proc/<pid>/stat."""
    try:
        fields = Path(f"/proc/{pid}/stat").read_text().rpartition(")")[2].split()
    except OSError:
        return None
    # After the command name: state is field 3, utime and stime are fields 14 and 15.
    return (int(fields[11]) + int(fields[12])) / os.sysconf("SC_CLK_TCK")


def _pool_accepting(supervisor: int) -> int:
    """How many workers of the pool under ``supervisor`` accept connections (from the
    board named on their command lines; 0 while none is started)."""
    from service.api.balanced_accept import LoadBoard
    from service.bench.query_server import process_tree

    for pid in process_tree(supervisor):
        try:
            argv = Path(f"/proc/{pid}/cmdline").read_bytes().split(b"\0")
        except OSError:
            continue
        if b"--board" in argv:
            return LoadBoard.accepting(Path(argv[argv.index(b"--board") + 1].decode()))
    return 0


def _coalescing(uvicorn_args: Sequence[str]) -> list[str]:
    """uvicorn's options with ``--http NAME`` as the coalescing protocol that ``tidemap
    serve`` and the worker pool use (service.api.coalescing_writes)."""
    out = list(uvicorn_args)
    if "--http" not in out:
        out += ["--http", "auto"]
    at = out.index("--http") + 1
    out[at] = f"service.api.coalescing_writes:{out[at]}"
    return out


@contextmanager
def running_server(
    database_url: str,
    log_dir: Path,
    *,
    uvicorn_args: Sequence[str] = (),
    env: Mapping[str, str] | None = None,
    workers: int = 1,
) -> Iterator[tuple[subprocess.Popen[bytes], str]]:
    """A uvicorn subprocess serving the app factory; yields (process, base URL).

    ``uvicorn_args`` (``--loop``, ``--http``) are added to the command line, ``env`` to the
    environment. Several ``workers`` run as ``tidemap serve --workers`` runs them
    (service.api.worker_pool): the yielded process is their supervisor."""
    port = _free_port()
    env = os.environ | {"TIDEMAP_DATABASE_URL": database_url} | dict(env or {})
    log = (log_dir / f"server-{port}.log").open("wb")
    if workers > 1:
        command = [
            sys.executable, "-m", "service.api.worker_pool", "--workers", str(workers),
            "--host", "127.0.0.1", "--port", str(port),
            "--log-level", "warning", "--no-access-log", *uvicorn_args,
        ]  # fmt: skip
    else:
        command = [
            sys.executable, "-m", "uvicorn", "service.api.factory:app_from_environment",
            "--factory", "--host", "127.0.0.1", "--port", str(port),
            "--log-level", "warning", "--no-access-log", *_coalescing(uvicorn_args),
        ]  # fmt: skip
    proc = subprocess.Popen(command, env=env, stdout=log, stderr=subprocess.STDOUT)
    base = f"http://127.0.0.1:{port}"
    try:
        deadline = time.monotonic() + 60
        while True:
            if proc.poll() is not None:
                raise RuntimeError(f"the server exited with {proc.returncode}: {_tail(log.name)}")
            try:
                answers = httpx.get(f"{base}/healthz", timeout=1).status_code == 200
            except httpx.TransportError:
                answers = False
            # A pool answers once its first worker accepts; connections opened before the
            # others do would all stay with that one.
            if answers and (workers == 1 or _pool_accepting(proc.pid) == workers):
                break
            if time.monotonic() > deadline:
                raise RuntimeError(f"the server did not answer within 60 s: {_tail(log.name)}")
            time.sleep(0.1)
        yield proc, base
    finally:
        proc.terminate()
        try:
            proc.wait(timeout=30)
        except subprocess.TimeoutExpired:
            proc.kill()
            proc.wait()
        log.close()


def _tail(path: str) -> str:
    return Path(path).read_text(errors="replace")[-2000:]


def _json_batches(docs: list[dict[str, Any]], size: int) -> list[bytes]:
    return [json.dumps(docs[i : i + size]).encode() for i in range(0, len(docs), size)]


def _ndjson(docs: list[dict[str, Any]]) -> bytes:
    return b"".join(json.dumps(doc).encode() + b"\n" for doc in docs)


def _pieces(body: bytes) -> Iterator[bytes]:
    for start in range(0, len(body), STREAM_PIECE):
        yield body[start : start + STREAM_PIECE]


def _backend_cpu(engine: Engine | None) -> dict[int, float]:
    """CPU seconds of each PostgreSQL backend serving the bench database (local server
    only: read from /proc), the benchmark's own connection left out."""
    if engine is None:
        return {}
    with engine.connect() as conn:
        pids = conn.execute(
            text(
                "SELECT pid FROM pg_stat_activity "
                "WHERE datname = current_database() AND pid <> pg_backend_pid()"
            )
        ).scalars()
        found = {int(pid): _cpu_seconds(int(pid)) for pid in pids}
    return {pid: cpu for pid, cpu in found.items() if cpu is not None}


def _measure(
    path: str, bodies: list[bytes], database_url: str, key: str, log_dir: Path, n_docs: int
) -> dict[str, Any]:
    collection = COLLECTIONS[path]
    is_postgres = make_url(database_url).get_backend_name() == "postgresql"
    watcher = create_engine(database_url, poolclass=NullPool) if is_postgres else None
    with running_server(database_url, log_dir) as (proc, base):
        start_rss = _proc_status_mb(proc.pid, "VmRSS")
        url = f"{base}/v1/collections/{collection}/documents"
        auth = {"Authorization": f"Bearer {key}"}
        counts = {"inserted": 0, "updated": 0, "unchanged": 0, "rejected": 0}
        with httpx.Client(timeout=httpx.Timeout(600.0)) as client:
            db_before = _backend_cpu(watcher)
            cpu_before = _cpu_seconds(proc.pid)
            started = time.perf_counter()
            for body in bodies:
                if path == "ndjson":
                    headers = auth | {"Content-Type": "application/x-ndjson"}
                    response = client.post(url, content=_pieces(body), headers=headers)
                else:
                    headers = auth | {"Content-Type": "application/json"}
                    response = client.post(url, content=body, headers=headers)
                if response.status_code != 200:
                    raise RuntimeError(
                        f"{path}: HTTP {response.status_code}: {response.text[:500]}"
                    )
                answer = response.json()
                for name in counts:
                    counts[name] += int(answer[name])
            seconds = time.perf_counter() - started
        cpu_after = _cpu_seconds(proc.pid)
        db_after = _backend_cpu(watcher)  # before the server closes its connections
        peak = _proc_status_mb(proc.pid, "VmHWM")
    if watcher is not None:
        watcher.dispose()
    db_cpu = sum(cpu - db_before.get(pid, 0.0) for pid, cpu in db_after.items())
    server_cpu = (
        round(cpu_after - cpu_before, 3)
        if cpu_before is not None and cpu_after is not None
        else None
    )
    if counts["inserted"] != n_docs:
        raise RuntimeError(f"{path}: expected {n_docs} inserted documents, got {counts}")
    return {
        "docs": n_docs,
        "seconds": round(seconds, 3),
        "docs_per_second": round(n_docs / seconds, 1),
        "peak_rss_mb": peak,
        "start_rss_mb": start_rss,
        # CPU time of the API process alone (not the client): on a busy machine docs
        # per CPU second says more than docs per second.
        "server_cpu_seconds": server_cpu,
        "docs_per_server_cpu_second": round(n_docs / server_cpu, 1) if server_cpu else None,
        # PostgreSQL only: CPU of the backends serving the API's connections.
        "database_cpu_seconds": round(db_cpu, 3) if is_postgres else None,
        "requests": len(bodies),
        **counts,
    }


def _prepare(database_url: str) -> str:
    """Bring the schema up to date, replace the bench collections, return a write key."""
    engine = make_engine(database_url)
    try:
        status = schema_status(engine)
        if status.state == "ahead":
            raise SchemaMismatchError(f"the schema {status.current} is newer than this code")
        if status.state == "behind":
            upgrade(engine)
        with make_session_factory(engine)() as session:
            for name in COLLECTIONS.values():
                try:
                    delete_collection(session, name)
                except NotFoundError:
                    session.rollback()
                create_collection(session, name)
            raw, _ = create_key(session, "bench-ingest", "write")
        return raw
    finally:
        engine.dispose()


def _revoke(database_url: str) -> None:
    engine = make_engine(database_url)
    try:
        with make_session_factory(engine)() as session:
            for info in list_keys(session):
                if info.name == "bench-ingest" and info.revoked_at is None:
                    revoke_key(session, info.id)
    finally:
        engine.dispose()


def run_ingest_benchmark(
    *, n_docs: int, database_url: str | None = None, seed: int = 0, progress: Progress | None = None
) -> dict[str, Any]:
    """Time both batch paths for ``n_docs`` invented documents; return the report."""
    say = progress or (lambda _message: None)
    settings = load_settings()
    with tempfile.TemporaryDirectory(prefix="tidemap-bench-") as tmp:
        url = database_url or f"sqlite:///{Path(tmp) / 'bench.db'}"
        say(f"generating {n_docs} invented documents (seed {seed})")
        docs = invented_documents(n_docs, seed=seed)
        bodies = {
            "json_batch": _json_batches(docs, settings.max_batch_items),
            "ndjson": [_ndjson(docs)],
        }
        key = _prepare(url)
        report: dict[str, Any] = {
            "database": make_url(url).get_backend_name(),
            "url": make_url(url).render_as_string(hide_password=True),
            "docs": n_docs,
            "mean_doc_bytes": round(sum(len(d["text"]) + len(d["title"]) for d in docs) / n_docs),
            "max_batch_items": settings.max_batch_items,
            "ndjson_chunk_size": settings.ndjson_chunk_size,
            "cpus": os.cpu_count(),
            "load_average_before": round(os.getloadavg()[0], 2),
        }
        try:
            for path in ("json_batch", "ndjson"):
                say(f"{report['database']}: {path} ...")
                report[path] = _measure(path, bodies[path], url, key, Path(tmp), n_docs)
                say(f"{report['database']}: {path}: {report[path]['docs_per_second']} docs/s")
        finally:
            _revoke(url)
    return report


def format_report(report: dict[str, Any]) -> str:
    lines = [
        f"{report['docs']} documents of ~{report['mean_doc_bytes']} bytes into {report['url']}"
    ]
    for path in ("json_batch", "ndjson"):
        r = report[path]
        lines.append(
            f"  {path:<10} {r['seconds']:8.2f} s  {r['docs_per_second']:9.1f} docs/s  "
            f"({r['docs_per_server_cpu_second']} per server CPU second)  "
            f"peak RSS {r['peak_rss_mb']} MiB, {r['requests']} request(s)"
        )
    return "\n".join(lines)
