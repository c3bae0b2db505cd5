"""The worker pool for real: processes, one port, connections spread evenly, restart, stop."""

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

from service.api.balanced_accept import LoadBoard
from service.api.worker_pool import listening_socket
from service.bench.query_server import process_tree
from service.storage.schema import upgrade
from service.storage.session import make_engine

pytestmark = pytest.mark.skipif(not Path("/proc/self/fd").is_dir(), reason="reads /proc (Linux)")


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


def test_a_child_process_accepts_from_the_inherited_socket() -> None:
    listener = listening_socket("127.0.0.1", 0)
    port = listener.getsockname()[1]
    child_code = (
        "import socket, sys\n"
        "s = socket.socket(fileno=int(sys.argv[1]))\n"
        "c, _ = s.accept()\n"
        "c.sendall(b'from the child')\n"
        "c.close()\n"
    )
    fd = listener.fileno()
    child = subprocess.Popen([sys.executable, "-c", child_code, str(fd)], pass_fds=(fd,))
    try:
        with socket.create_connection(("127.0.0.1", port), timeout=30) as conn:
            conn.settimeout(30)
            assert conn.recv(100) == b"from the child"
        assert child.wait(timeout=30) == 0
    finally:
        listener.close()
        if child.poll() is None:
            child.kill()


def _established_to(pid: int, port: int) -> int:
    """How many established TCP connections on local ``port`` process ``pid`` holds."""
    inodes = set()
    for fd in Path(f"/proc/{pid}/fd").iterdir():
        try:
            target = os.readlink(fd)
        except OSError:
            continue
        if target.startswith("socket:["):
            inodes.add(target[8:-1])
    count = 0
    for table in ("/proc/net/tcp", "/proc/net/tcp6"):
        if not Path(table).exists():
            continue
        for line in Path(table).read_text().splitlines()[1:]:
            fields = line.split()
            local_port = int(fields[1].rsplit(":", 1)[1], 16)
            if local_port == port and fields[3] == "01" and fields[9] in inodes:
                count += 1
    return count


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
        _wait(lambda: _accepting(workers) == 2)  # the second may still be importing
        # A client that opens its pool of keep-alive connections at once: the workers
        # split them evenly (a shared socket had given one worker all of them).
        pool_of = [socket.create_connection(("127.0.0.1", port)) for _ in range(64)]
        try:
            for conn in pool_of:
                conn.sendall(b"GET /healthz HTTP/1.1\r\nHost: pool\r\n\r\n")
            for conn in pool_of:
                assert conn.recv(65536).startswith(b"HTTP/1.1 200")
            held = [_established_to(p, port) for p in workers]
            assert sum(held) == 64, held
            assert abs(held[0] - held[1]) <= 4, held
        finally:
            for conn in pool_of:
                conn.close()

        # Fresh connections one after another reach both workers too.
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


def _accepting(workers: list[int]) -> int:
    """How many slots of the pool's board are taken by a worker that accepts."""
    argv = Path(f"/proc/{workers[0]}/cmdline").read_bytes().split(b"\0")
    board = Path(argv[argv.index(b"--board") + 1].decode())
    return LoadBoard.accepting(board)


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
