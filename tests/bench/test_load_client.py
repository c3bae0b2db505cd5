"""The load generator against a tiny HTTP/1.1 server that answers, fails, closes or hangs."""

from __future__ import annotations

import json
import socket
import socketserver
import subprocess
import sys
import threading
from collections import Counter
from collections.abc import Iterator

import pytest

from service.bench.load_client import START_LINE, LoadSpec, percentile, run_load

ANSWERS = {
    b"/ok": b"HTTP/1.1 200 OK\r\nContent-Length: 2\r\n\r\nok",
    b"/chunked": (
        b"HTTP/1.1 200 OK\r\nTransfer-Encoding: chunked\r\n\r\n3\r\nabc\r\n2\r\nde\r\n0\r\n\r\n"
    ),
    b"/fail": b"HTTP/1.1 500 Internal Server Error\r\nContent-Length: 4\r\n\r\nfail",
    b"/close": b"HTTP/1.1 200 OK\r\nContent-Length: 2\r\nConnection: close\r\n\r\nok",
}


class _Handler(socketserver.BaseRequestHandler):
    server: _Server

    def handle(self) -> None:
        buf = b""
        while True:
            while b"\r\n\r\n" not in buf:
                data = self.request.recv(65536)
                if not data:
                    return
                buf += data
            head, _, buf = buf.partition(b"\r\n\r\n")
            path = head.split(b" ")[1]
            with self.server.lock:
                self.server.seen[path] += 1
            if path == b"/drop":
                return  # closes without an answer
            if path == b"/hang":
                self.request.recv(65536)  # until the client gives up
                return
            self.request.sendall(ANSWERS[path])
            if path == b"/close":
                return


class _Server(socketserver.ThreadingTCPServer):
    daemon_threads = True
    allow_reuse_address = True

    def __init__(self) -> None:
        super().__init__(("127.0.0.1", 0), _Handler)
        self.lock = threading.Lock()
        self.seen: Counter[bytes] = Counter()


@pytest.fixture
def server() -> Iterator[_Server]:
    srv = _Server()
    thread = threading.Thread(target=srv.serve_forever, daemon=True)
    thread.start()
    yield srv
    srv.shutdown()
    srv.server_close()


def _spec(server: _Server, *paths: str, **kw: float) -> LoadSpec:
    requests = [f"GET {p} HTTP/1.1\r\nHost: t\r\n\r\n".encode() for p in paths]
    options: dict[str, float] = {"concurrency": 3, "seconds": 0.3} | kw
    return LoadSpec(
        "127.0.0.1",
        server.server_address[1],
        requests,
        concurrency=int(options["concurrency"]),
        seconds=options["seconds"],
        timeout=options.get("timeout", 5.0),
    )


def test_every_answer_is_counted_with_its_latency(server: _Server) -> None:
    result = run_load(_spec(server, "/ok", "/chunked"))
    assert result["requests"] > 10 and result["errors"] == 0
    # Requests in flight at the deadline are finished, so both sides count the same.
    assert result["requests"] == server.seen[b"/ok"] + server.seen[b"/chunked"]
    assert result["statuses"] == {"200": result["requests"]}
    assert 0 < result["p50_ms"] <= result["p99_ms"] <= result["max_ms"]
    assert result["rps"] == pytest.approx(result["requests"] / result["seconds"], rel=0.01)


def test_non_2xx_answers_are_errors_without_latency(server: _Server) -> None:
    result = run_load(_spec(server, "/fail", "/ok"))
    assert result["statuses"]["500"] == server.seen[b"/fail"] > 0
    assert result["errors"] == result["statuses"]["500"]
    assert result["requests"] == result["statuses"]["500"] + result["statuses"]["200"]


def test_connection_close_is_followed_by_a_new_connection(server: _Server) -> None:
    result = run_load(_spec(server, "/close", concurrency=1))
    assert result["errors"] == 0 and result["requests"] == server.seen[b"/close"] > 3


def test_dropped_connections_and_timeouts_are_errors(server: _Server) -> None:
    dropped = run_load(_spec(server, "/drop", concurrency=2))
    assert dropped["failures"]["connection"] == dropped["errors"] == dropped["requests"] > 0
    assert dropped["p50_ms"] is None  # no answer, no latency
    hung = run_load(_spec(server, "/hang", concurrency=2, seconds=0.2, timeout=0.1))
    assert hung["failures"] == {"timeout": hung["requests"]} and hung["requests"] >= 2


def test_a_refused_connection_is_an_error() -> None:
    with socket.socket() as sock:
        sock.bind(("127.0.0.1", 0))
        port = sock.getsockname()[1]  # nobody listens once it is closed
    spec = LoadSpec("127.0.0.1", port, [b"GET / HTTP/1.1\r\n\r\n"], concurrency=2, seconds=0.1)
    result = run_load(spec)
    assert result["failures"]["connect"] >= 2 and result["errors"] == result["requests"]


def test_it_runs_as_a_process_reading_a_spec(server: _Server) -> None:
    spec = _spec(server, "/ok", concurrency=2, seconds=0.2)
    run = subprocess.run(
        [sys.executable, "-m", "service.bench.load_client"],
        input=spec.to_json(),
        capture_output=True,
        text=True,
        timeout=60,
        check=True,
    )
    start, result = run.stdout.splitlines()
    assert start == START_LINE
    assert json.loads(result)["requests"] == server.seen[b"/ok"] > 0


def test_spec_round_trips_through_json() -> None:
    spec = LoadSpec("h", 1, [b"GET /\xe9 HTTP/1.1\r\n\r\n", b"POST / HTTP/1.1\r\n\r\n{}"], seed=4)
    assert LoadSpec.from_json(spec.to_json()) == spec


def test_nearest_rank_percentiles() -> None:
    values = [float(v) for v in range(1, 101)]
    assert [percentile(values, q) for q in (0.01, 0.5, 0.99, 1.0)] == [1.0, 50.0, 99.0, 100.0]
    assert percentile([7.0], 0.99) == 7.0
    assert percentile([], 0.5) is None


def test_the_load_runs_on_uvloop_when_it_is_installed() -> None:
    from service.bench.load_client import _event_loop_runner

    uvloop = pytest.importorskip("uvloop")
    assert _event_loop_runner() is uvloop.run
