"""``tidemap worker`` in the foreground: signals and a clean stop.

First SIGTERM or SIGINT: stop at the next stage boundary; the running build (if any) goes
back to the queue without using up an attempt, so another worker takes it at once.
Second signal: give the job back now and exit (the build thread dies with the process;
the lease fence keeps anything it still writes from becoming visible).
"""

from __future__ import annotations

import logging
import signal
import threading
from types import FrameType

from service.worker.worker import Worker

log = logging.getLogger("tidemap.worker")
SIGNALS = (signal.SIGTERM, signal.SIGINT)


def run_in_foreground(worker: Worker, *, once: bool = False) -> int:
    """Run the worker loop (or one iteration) until it ends or is signalled; exit code.

    Must be called from the main thread (Python delivers signals there).
    """
    hurry = threading.Event()
    received: list[int] = []

    def handler(signum: int, _frame: FrameType | None) -> None:
        received.append(signum)
        if len(received) == 1:
            log.warning("worker %s: stopping after the current stage", worker.owner)
            worker.request_stop()
        else:
            hurry.set()

    previous = {sig: signal.signal(sig, handler) for sig in SIGNALS}
    target = worker.run_once if once else worker.run_forever
    thread = threading.Thread(target=target, name="tidemap-worker", daemon=True)
    try:
        thread.start()
        while thread.is_alive():
            thread.join(0.2)
            if hurry.is_set():
                worker.abandon()
                log.warning("worker %s: gave the running build back and exits", worker.owner)
                return 130
    finally:
        for sig, old in previous.items():
            signal.signal(sig, old)
    return 0
