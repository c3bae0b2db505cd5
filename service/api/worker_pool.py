"""Several API worker processes on one port, each with its own listening socket.

uvicorn's own ``--workers`` shares one socket between the processes, and whichever is
awake accepts every pending connection: a client that opens its pool of keep-alive
connections at once (other applications do) lands on one worker while the other idles
(seen in ``tidemap bench query``: 32 connections split 32/0). Here every worker binds
the port with SO_REUSEPORT, so the kernel spreads new connections over the workers'
sockets (Linux; socket(7)).

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
import time
from collections.abc import Sequence
from types import FrameType

__all__ = ["reuseport_socket", "run_pool"]

RESTART_PAUSE_SECONDS = 2.0
STOP_GRACE_SECONDS = 30.0


def reuseport_socket(host: str, port: int) -> socket.socket:
    """A listening TCP socket on (host, port) that other processes may bind as well."""
    family = socket.AF_INET6 if ":" in host else socket.AF_INET
    sock = socket.socket(family, socket.SOCK_STREAM)
    sock.setsockopt(socket.SOL_SOCKET, socket.SO_REUSEADDR, 1)
    sock.setsockopt(socket.SOL_SOCKET, socket.SO_REUSEPORT, 1)
    sock.bind((host, port))
    sock.listen(2048)
    sock.setblocking(False)
    return sock


def _worker_command(
    host: str, port: int, log_level: str, loop: str, http: str, access_log: bool
) -> list[str]:
    return [
        sys.executable, "-m", "service.api.worker_pool", "--host", host, "--port", str(port),
        "--log-level", log_level, "--loop", loop, "--http", http,
        *([] if access_log else ["--no-access-log"]),
    ]  # fmt: skip


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
    if not hasattr(socket, "SO_REUSEPORT"):
        raise RuntimeError("several workers need SO_REUSEPORT (Linux, macOS)")
    # Bind once here so a port in use fails now, in the operator's terminal.
    reuseport_socket(host, port).close()
    command = _worker_command(host, port, log_level, loop, http, access_log)
    stopping = False

    def stop(_signum: int, _frame: FrameType | None) -> None:
        nonlocal stopping
        stopping = True

    previous = {s: signal.signal(s, stop) for s in (signal.SIGTERM, signal.SIGINT)}
    procs: list[subprocess.Popen[bytes]] = [
        subprocess.Popen(command, env=env) for _ in range(workers)
    ]
    try:
        while not stopping:
            time.sleep(0.2)
            for i, proc in enumerate(procs):
                if proc.poll() is not None and not stopping:
                    print(
                        f"tidemap: API worker {proc.pid} exited with {proc.returncode}; "
                        "starting another",
                        file=sys.stderr,
                    )
                    time.sleep(RESTART_PAUSE_SECONDS)
                    procs[i] = subprocess.Popen(command, env=env)
    finally:
        _stop_all(procs)
        for s, handler in previous.items():
            signal.signal(s, handler)
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

    config = uvicorn.Config(
        "service.api.factory:app_from_environment",
        factory=True,
        log_level=args.log_level,
        loop=args.loop,
        http=args.http,
        access_log=args.access_log,
    )
    uvicorn.Server(config).run(sockets=[reuseport_socket(args.host, args.port)])


def main(argv: Sequence[str] | None = None) -> int:
    """``--workers 1`` (the default) is one worker of a pool; more runs the supervisor."""
    parser = argparse.ArgumentParser(description="API worker processes on one port.")
    parser.add_argument("--workers", type=int, default=1)
    parser.add_argument("--host", required=True)
    parser.add_argument("--port", type=int, required=True)
    parser.add_argument("--log-level", default="info")
    parser.add_argument("--loop", default="auto")
    parser.add_argument("--http", default="auto")
    parser.add_argument("--no-access-log", dest="access_log", action="store_false")
    args = parser.parse_args(argv)
    if args.workers > 1:
        return run_pool(
            args.workers, args.host, args.port, log_level=args.log_level, loop=args.loop,
            http=args.http, access_log=args.access_log,
        )  # fmt: skip
    _run_worker(args)
    return 0


if __name__ == "__main__":
    os.environ.setdefault("PYTHONUNBUFFERED", "1")
    sys.exit(main())
