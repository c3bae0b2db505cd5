"""The worker pool for real: processes, one port, connections spread, restart, stop."""

from __future__ import annotations

import json
import os
import signal
import socket
import subprocess
import sys
import time
from pathlib import Path

import httpx
import pytest

from service.api.worker_pool import reuseport_socket
from service.bench.query_server import process_tree
from service.storage.schema import upgrade
from service.storage.session import make_engine

pytestmark = pytest.mark.skipif(not hasattr(socket, "SO_REUSEPORT"), reason="needs SO_REUSEPORT")


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


def _wait(condition: object, seconds: float = 60.0) -> None:
    deadline = time.monotonic() + seconds
    while not condition():  # type: ignore[operator]
        if time.monotonic() > deadline:
            raise AssertionError("timed out")
        time.sleep(0.1)


def _answers(base: str) -> bool:
    try:
        return httpx.get(f"{base}/healthz", timeout=1).status_code == 200
    except httpx.TransportError:
        return False


def _workers(pid: int) -> list[int]:
    return [p for p in process_tree(pid) if p != pid]


def test_sockets_of_two_processes_share_a_port() -> None:
    port = _free_port()
    first = reuseport_socket("127.0.0.1", port)
    second = reuseport_socket("127.0.0.1", port)  # a plain socket would get EADDRINUSE
    try:
        assert first.getsockname() == second.getsockname() == ("127.0.0.1", port)
    finally:
        first.close()
        second.close()


def test_a_pool_serves_spreads_connections_restarts_and_stops(tmp_path: Path) -> None:
    url = f"sqlite:///{tmp_path / 'pool.db'}"
    engine = make_engine(url)
    upgrade(engine)
    engine.dispose()
    port = _free_port()
    base = f"http://127.0.0.1:{port}"
    env = os.environ | {"TIDEMAP_DATABASE_URL": url, "TIDEMAP_EMBEDDED_WORKER": "off"}
    command = [
        sys.executable, "-m", "service.api.worker_pool", "--workers", "2",
        "--host", "127.0.0.1", "--port", str(port), "--log-level", "warning", "--no-access-log",
    ]  # fmt: skip
    pool = subprocess.Popen(command, env=env)
    try:
        _wait(lambda: _answers(base) and len(_workers(pool.pid)) == 2)
        workers = _workers(pool.pid)
        # Many fresh connections: the kernel hands them to both workers' sockets. Each
        # worker's CPU time grows only with what it serves.
        before = {p: _cpu_ticks(p) for p in workers}
        for _ in range(300):
            assert _fresh_connection_get(port).startswith(b"HTTP/1.1 200")
        grown = [p for p in workers if _cpu_ticks(p) > before[p]]
        assert sorted(grown) == sorted(workers)

        # A worker that dies is replaced, and the port keeps answering.
        os.kill(workers[0], signal.SIGKILL)
        _wait(lambda: workers[0] not in _workers(pool.pid) and len(_workers(pool.pid)) == 2)
        _wait(lambda: _answers(base))

        # SIGTERM stops the supervisor and every worker.
        remaining = _workers(pool.pid)
        pool.send_signal(signal.SIGTERM)
        assert pool.wait(timeout=60) == 0
        _wait(lambda: not any(_alive(p) for p in remaining), seconds=30)
        assert not _answers(base)
    finally:
        if pool.poll() is None:
            pool.kill()
            pool.wait()


def _fresh_connection_get(port: int) -> bytes:
    with socket.create_connection(("127.0.0.1", port), timeout=10) as conn:
        conn.sendall(b"GET /healthz HTTP/1.1\r\nHost: pool\r\nConnection: close\r\n\r\n")
        answer = b""
        while chunk := conn.recv(65536):
            answer += chunk
    return answer


def _cpu_ticks(pid: int) -> int:
    fields = Path(f"/proc/{pid}/stat").read_text().rpartition(")")[2].split()
    return int(fields[11]) + int(fields[12])  # utime + stime, after the name


def _alive(pid: int) -> bool:
    try:
        state = Path(f"/proc/{pid}/stat").read_text().rpartition(")")[2].split()[0]
    except OSError:
        return False
    return state != "Z"


def test_api_processes_run_blas_on_one_thread(tmp_path: Path) -> None:
    # In a process of its own: the limit is process-wide and would reach other tests.
    url = f"sqlite:///{tmp_path / 'blas.db'}"
    engine = make_engine(url)
    upgrade(engine)
    engine.dispose()
    probe = (
        "from threadpoolctl import threadpool_info\n"
        "from service.api.factory import app_from_environment\n"
        "before = [p['num_threads'] for p in threadpool_info() if p['user_api'] == 'blas']\n"
        "app_from_environment()\n"
        "after = [p['num_threads'] for p in threadpool_info() if p['user_api'] == 'blas']\n"
        "import json; print(json.dumps([before, after]))\n"
    )
    env = os.environ | {"TIDEMAP_DATABASE_URL": url, "OPENBLAS_NUM_THREADS": "2"}
    out = subprocess.run(
        [sys.executable, "-c", probe], env=env, capture_output=True, text=True, timeout=120
    )
    assert out.returncode == 0, out.stderr
    before, after = json.loads(out.stdout)
    assert before and all(n == 2 for n in before)
    assert after and all(n == 1 for n in after)
