"""A worker process with the fake geometry, for the fault tests (run as
``python -m tests.worker.fake_worker_process URL MARKER --stage S [--sleep T]``).

It writes MARKER once it is inside stage S. With ``--stage store`` it commits every array
separately and then hangs after the second one, so a kill leaves a partly stored version.
"""

from __future__ import annotations

import argparse
import logging
import sys
import time
from pathlib import Path
from typing import Any

from service.pipeline import build_run
from service.storage import index_store
from service.storage.session import make_engine, make_session_factory
from service.worker.shutdown import run_in_foreground
from service.worker.worker import Worker, WorkerOptions
from tests.fake_compute import FakeCompute


def main() -> int:
    parser = argparse.ArgumentParser()
    parser.add_argument("url")
    parser.add_argument("marker", type=Path)
    parser.add_argument("--stage", default="fake-vectors")
    parser.add_argument("--sleep", type=float, default=600.0)
    parser.add_argument("--lease", type=float, default=2.0)
    args = parser.parse_args()
    logging.basicConfig(level=logging.INFO, stream=sys.stderr)

    def arrived() -> None:
        args.marker.write_text("in stage")

    if args.stage == "store":
        build_run.STORE_BATCH_BYTES = 1  # commit every array: a kill leaves some behind
        original = index_store.insert_array_rows
        calls = []

        def slow_insert(conn: Any, rows: Any) -> None:
            original(conn, rows)
            calls.append(1)
            if len(calls) == 2:
                arrived()
                time.sleep(args.sleep)

        index_store.insert_array_rows = slow_insert  # type: ignore[assignment]
        compute = FakeCompute(stage="none")
    else:
        compute = FakeCompute(stage=args.stage, sleep=args.sleep, on_enter=arrived)
    engine = make_engine(args.url)
    options = WorkerOptions(lease_seconds=args.lease, poll_seconds=0.1, schedule=False)
    worker = Worker(make_session_factory(engine), options, compute=compute, owner="doomed")
    return run_in_foreground(worker)


if __name__ == "__main__":
    raise SystemExit(main())
