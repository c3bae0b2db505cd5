"""Connections spread evenly over the API worker processes.

The workers of a pool share one listening socket. An event loop's own accept takes every
pending connection at once, and the kernel's SO_REUSEPORT hashing spreads them at
random: with a client that opens its pool of 32 keep-alive connections together, the
split was 19/13 in ``tidemap bench query`` (seen with ``ss -tnp``), so the requests of
the busier worker waited 1.5 times as long. Here each worker accepts one connection at a
time and first looks at a shared board of how many connections every worker holds: a
worker that holds more than another steps back for a moment (``DEFER_SECONDS``) so the
less busy one takes the connection, and takes it itself if it is still waiting then (a
peer that is stuck or gone delays a new connection by that moment, never more).

The board is a small file mapped into every worker (one int64 per worker slot); a count
is a hint, written by its owner on each accept and every ``PUBLISH_SECONDS``. A slot
whose worker is not accepting (not started yet, stopping, being restarted) reads
``ABSENT``, and nobody steps back for it.
"""

from __future__ import annotations

import asyncio
import errno
import logging
import mmap
import socket
import sys
from collections.abc import Callable
from pathlib import Path

__all__ = ["ABSENT", "DEFER_SECONDS", "PUBLISH_SECONDS", "BalancedAcceptor", "LoadBoard"]

ABSENT = -1
DEFER_SECONDS = 0.002
PUBLISH_SECONDS = 0.25
_SLOT_BYTES = 8
# Out of descriptors or buffers: asyncio pauses its accept for a second too.
_RESOURCE_ERRORS = {errno.EMFILE, errno.ENFILE, errno.ENOBUFS, errno.ENOMEM}
_RESOURCE_PAUSE_SECONDS = 1.0

log = logging.getLogger(__name__)


class LoadBoard:
    """Connection counts of a pool's workers, one slot each, in a shared file."""

    def __init__(self, path: Path, slot: int) -> None:
        with path.open("r+b") as f:
            self._map = mmap.mmap(f.fileno(), 0)
        self._counts = memoryview(self._map).cast("q")
        if not 0 <= slot < len(self._counts):
            raise ValueError(f"slot {slot} outside the board's {len(self._counts)} slots")
        self.slot = slot

    @staticmethod
    def create(path: Path, workers: int) -> None:
        """A board for ``workers`` slots, none of them accepting yet."""
        path.write_bytes(ABSENT.to_bytes(_SLOT_BYTES, sys.byteorder, signed=True) * workers)

    @staticmethod
    def accepting(path: Path) -> int:
        """How many slots of the board at ``path`` belong to a worker that accepts."""
        counts = memoryview(path.read_bytes()).cast("q")
        return sum(1 for n in counts if n != ABSENT)

    def publish(self, connections: int) -> None:
        self._counts[self.slot] = connections

    def withdraw(self) -> None:
        """Mark this slot as not accepting."""
        self._counts[self.slot] = ABSENT

    def fewest_elsewhere(self) -> int | None:
        """The smallest count among the other accepting workers (None when there are
        none)."""
        others = [n for i, n in enumerate(self._counts) if i != self.slot and n != ABSENT]
        return min(others) if others else None

    def close(self) -> None:
        self._counts.release()
        self._map.close()


class BalancedAcceptor:
    """Accepts from ``listener`` on the running loop, one connection per readiness, and
    hands each to ``protocol_factory`` (``loop.connect_accepted_socket``).

    ``held`` tells how many connections this process serves (uvicorn's connection set).
    """

    def __init__(
        self,
        listener: socket.socket,
        board: LoadBoard,
        protocol_factory: Callable[[], asyncio.Protocol],
        held: Callable[[], int],
    ) -> None:
        self._listener = listener
        self._board = board
        self._factory = protocol_factory
        self._held = held
        self._loop: asyncio.AbstractEventLoop | None = None
        self._handing: set[asyncio.Task[object]] = set()  # accepted, not yet connected
        self._deferred = False
        self._watching = False
        self._timers: list[asyncio.TimerHandle] = []
        self.accepted = 0

    def start(self) -> None:
        self._loop = asyncio.get_running_loop()
        self._listener.setblocking(False)
        self._watch()
        self._publish_periodically()

    def stop(self) -> None:
        """Accept nothing more (the connections already handed on stay)."""
        self._unwatch()
        for timer in self._timers:
            timer.cancel()
        self._timers.clear()
        self._board.withdraw()

    def _count(self) -> int:
        return self._held() + len(self._handing)

    def _watch(self) -> None:
        assert self._loop is not None
        if not self._watching:
            self._loop.add_reader(self._listener.fileno(), self._ready)
            self._watching = True

    def _unwatch(self) -> None:
        if self._watching and self._loop is not None:
            self._loop.remove_reader(self._listener.fileno())
            self._watching = False

    def _later(self, seconds: float, callback: Callable[[], None]) -> None:
        assert self._loop is not None
        self._timers = [t for t in self._timers if not t.cancelled()]
        self._timers.append(self._loop.call_later(seconds, callback))

    def _publish_periodically(self) -> None:
        self._board.publish(self._count())
        self._later(PUBLISH_SECONDS, self._publish_periodically)

    def _ready(self) -> None:
        mine = self._count()
        self._board.publish(mine)
        fewest = self._board.fewest_elsewhere()
        if not self._deferred and fewest is not None and mine > fewest:
            # Let the less busy worker take it; if it is still waiting after the pause,
            # this worker does.
            self._deferred = True
            self._unwatch()
            self._later(DEFER_SECONDS, self._watch)
            return
        self._deferred = False
        try:
            conn, _ = self._listener.accept()
        except (BlockingIOError, InterruptedError, ConnectionAbortedError):
            return  # another worker took it, or the client gave up
        except OSError as exc:
            if exc.errno not in _RESOURCE_ERRORS:
                raise
            log.error("accept failed (%s); pausing new connections for 1 s", exc)
            self._unwatch()
            self._later(_RESOURCE_PAUSE_SECONDS, self._watch)
            return
        self.accepted += 1
        self._hand_on(conn)
        self._board.publish(mine + 1)

    def _hand_on(self, conn: socket.socket) -> None:
        assert self._loop is not None
        conn.setblocking(False)
        if conn.family in (socket.AF_INET, socket.AF_INET6):
            conn.setsockopt(socket.IPPROTO_TCP, socket.TCP_NODELAY, 1)
        task = self._loop.create_task(self._loop.connect_accepted_socket(self._factory, conn))
        self._handing.add(task)

        def done(finished: asyncio.Task[object]) -> None:
            self._handing.discard(finished)
            if not finished.cancelled() and finished.exception() is not None:
                log.warning("a new connection failed: %s", finished.exception())
                conn.close()

        task.add_done_callback(done)
