"""Several API worker processes on one port, with the connections spread evenly.

The supervisor binds the port once and every worker inherits that listening socket.
Neither of the usual ways spreads a client's connection pool evenly: when processes
share a socket, whichever is awake accepts every pending connection (seen in
``tidemap bench query``: 32 connections split 32/0), and with a socket per process
(SO_REUSEPORT) the kernel hashes connections to them at random (19/13). Here each
worker accepts through ``service.api.balanced_accept``: one connection at a time, the
least busy worker first, by a shared board of connection counts.

The supervisor starts ``workers`` processes (``python -m service.api.worker_pool``),
restarts one that dies (with a pause, so a worker failing at start does not spin), and on
SIGTERM or SIGINT stops them all and waits for them: uvicorn finishes the requests in
flight.
"""

from __future__ import annotations

import argparse
import os
import signal
import socket
import subprocess
import sys
import tempfile
import time
from collections.abc import Sequence
from pathlib import Path
from types import FrameType

__all__ = ["listening_socket", "run_pool"]

RESTART_PAUSE_SECONDS = 2.0
STOP_GRACE_SECONDS = 30.0
BACKLOG = 2048


def listening_socket(host: str, port: int) -> socket.socket:
    """A listening TCP socket on (host, port), inheritable by the worker processes."""
    family = socket.AF_INET6 if ":" in host else socket.AF_INET
    sock = socket.socket(family, socket.SOCK_STREAM)
    sock.setsockopt(socket.SOL_SOCKET, socket.SO_REUSEADDR, 1)
    sock.bind((host, port))
    sock.listen(BACKLOG)
    sock.set_inheritable(True)
    return sock


def _worker_command(
    fd: int, slot: int, board: Path, log_level: str, loop: str, http: str, access_log: bool
) -> list[str]:
    return [
        sys.executable, "-m", "service.api.worker_pool", "--fd", str(fd), "--slot", str(slot),
        "--board", str(board), "--log-level", log_level, "--loop", loop, "--http", http,
        *([] if access_log else ["--no-access-log"]),
    ]  # fmt: skip


def _board_path() -> Path:
    # Shared memory where Linux has it; the file is a few bytes either way.
    where = "/dev/shm" if os.path.isdir("/dev/shm") else None
    fd, name = tempfile.mkstemp(prefix="tidemap-pool-", suffix=".board", dir=where)
    os.close(fd)
    return Path(name)


def _withdraw(board: Path, slot: int) -> None:
    from service.api.balanced_accept import LoadBoard

    entry = LoadBoard(board, slot)
    entry.withdraw()
    entry.close()


def run_pool(
    workers: int,
    host: str,
    port: int,
    *,
    log_level: str = "info",
    loop: str = "auto",
    http: str = "auto",
    access_log: bool = True,
    env: dict[str, str] | None = None,
) -> int:
    """Run ``workers`` API processes until SIGTERM/SIGINT; returns the exit status."""
    from service.api.balanced_accept import LoadBoard

    # Bound here, so a port in use fails now, in the operator's terminal.
    listener = listening_socket(host, port)
    board = _board_path()
    LoadBoard.create(board, workers)
    fd = listener.fileno()

    def start(slot: int) -> subprocess.Popen[bytes]:
        command = _worker_command(fd, slot, board, log_level, loop, http, access_log)
        return subprocess.Popen(command, env=env, pass_fds=(fd,))

    stopping = False

    def stop(_signum: int, _frame: FrameType | None) -> None:
        nonlocal stopping
        stopping = True

    previous = {s: signal.signal(s, stop) for s in (signal.SIGTERM, signal.SIGINT)}
    procs = [start(slot) for slot in range(workers)]
    try:
        while not stopping:
            time.sleep(0.2)
            for slot, proc in enumerate(procs):
                if proc.poll() is not None and not stopping:
                    print(
                        f"tidemap: API worker {proc.pid} exited with {proc.returncode}; "
                        "starting another",
                        file=sys.stderr,
                    )
                    _withdraw(board, slot)  # its last count is stale
                    time.sleep(RESTART_PAUSE_SECONDS)
                    procs[slot] = start(slot)
    finally:
        _stop_all(procs)
        for s, handler in previous.items():
            signal.signal(s, handler)
        listener.close()
        board.unlink(missing_ok=True)
    return 0


def _stop_all(procs: Sequence[subprocess.Popen[bytes]]) -> None:
    for proc in procs:
        if proc.poll() is None:
            proc.send_signal(signal.SIGTERM)
    deadline = time.monotonic() + STOP_GRACE_SECONDS
    for proc in procs:
        try:
            proc.wait(timeout=max(0.1, deadline - time.monotonic()))
        except subprocess.TimeoutExpired:
            proc.kill()
            proc.wait()


def _run_worker(args: argparse.Namespace) -> None:
    import uvicorn

    from service.api.coalescing_writes import http_protocol

    config = uvicorn.Config(
        "service.api.factory:app_from_environment",
        factory=True,
        log_level=args.log_level,
        loop=args.loop,
        http=http_protocol(args.http),
        access_log=args.access_log,
    )
    from service.api.pool_server import PoolServer

    listener = socket.socket(fileno=args.fd)
    PoolServer(config, listener, Path(args.board), args.slot).run()


def main(argv: Sequence[str] | None = None) -> int:
    """With ``--workers`` above 1, the supervisor; with ``--fd``, one worker of a pool."""
    parser = argparse.ArgumentParser(description="API worker processes on one port.")
    parser.add_argument("--workers", type=int, default=1)
    parser.add_argument("--host", default="127.0.0.1")
    parser.add_argument("--port", type=int, default=8000)
    parser.add_argument("--fd", type=int, help="the pool's listening socket (workers)")
    parser.add_argument("--slot", type=int, default=0, help="this worker's board slot")
    parser.add_argument("--board", help="the pool's board of connection counts")
    parser.add_argument("--log-level", default="info")
    parser.add_argument("--loop", default="auto")
    parser.add_argument("--http", default="auto")
    parser.add_argument("--no-access-log", dest="access_log", action="store_false")
    args = parser.parse_args(argv)
    if args.fd is None:
        return run_pool(
            max(args.workers, 1), args.host, args.port, log_level=args.log_level,
            loop=args.loop, http=args.http, access_log=args.access_log,
        )  # fmt: skip
    if args.board is None:
        parser.error("--fd needs --board")
    _run_worker(args)
    return 0


if __name__ == "__main__":
    os.environ.setdefault("PYTHONUNBUFFERED", "1")
    sys.exit(main())
