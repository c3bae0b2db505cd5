"""Balanced accepting on plain sockets: the shared board, and acceptors sharing a socket."""

from __future__ import annotations

import asyncio
import socket
from pathlib import Path

import pytest

from service.api.balanced_accept import BalancedAcceptor, LoadBoard


def test_a_board_shows_each_worker_the_counts_of_the_others(tmp_path: Path) -> None:
    path = tmp_path / "pool.board"
    LoadBoard.create(path, 3)
    boards = [LoadBoard(path, slot) for slot in range(3)]
    try:
        # Nobody accepts yet: nobody to step back for.
        assert [b.fewest_elsewhere() for b in boards] == [None, None, None]
        boards[1].publish(0)
        assert [b.fewest_elsewhere() for b in boards] == [0, None, 0]
        boards[0].publish(5)
        boards[1].publish(2)
        boards[2].publish(7)
        # Each sees the smallest count among the others, never its own.
        assert [b.fewest_elsewhere() for b in boards] == [2, 5, 2]
        boards[1].withdraw()  # a worker stopping or being restarted
        assert [b.fewest_elsewhere() for b in boards] == [7, 5, 5]
    finally:
        for b in boards:
            b.close()


def test_a_board_of_one_has_no_peer_and_a_slot_must_exist(tmp_path: Path) -> None:
    path = tmp_path / "one.board"
    LoadBoard.create(path, 1)
    only = LoadBoard(path, 0)
    try:
        only.publish(3)
        assert only.fewest_elsewhere() is None
    finally:
        only.close()
    with pytest.raises(ValueError, match="slot 1 outside"):
        LoadBoard(path, 1)


class _Recorder(asyncio.Protocol):
    def __init__(self, held: set[_Recorder]) -> None:
        self._held = held

    def connection_made(self, transport: asyncio.BaseTransport) -> None:
        self._held.add(self)

    def connection_lost(self, exc: Exception | None) -> None:
        self._held.discard(self)


def _listener() -> socket.socket:
    sock = socket.socket()
    sock.bind(("127.0.0.1", 0))
    sock.listen(128)
    return sock


async def _open_clients(port: int, n: int) -> list[socket.socket]:
    clients = []
    for _ in range(n):
        c = socket.socket()
        c.setblocking(False)
        await asyncio.get_running_loop().sock_connect(c, ("127.0.0.1", port))
        clients.append(c)
    return clients


async def _settle(condition: object, seconds: float = 5.0) -> None:
    deadline = asyncio.get_running_loop().time() + seconds
    while not condition():  # type: ignore[operator]
        if asyncio.get_running_loop().time() > deadline:
            raise AssertionError("timed out")
        await asyncio.sleep(0.01)


def test_two_acceptors_on_one_socket_take_turns(tmp_path: Path) -> None:
    path = tmp_path / "two.board"
    LoadBoard.create(path, 2)
    listener = _listener()
    held: list[set[_Recorder]] = [set(), set()]
    # One descriptor each, for the same socket, as the pool's processes have (one event
    # loop watches a descriptor for one callback only).
    copies = [listener.dup(), listener.dup()]

    async def scenario() -> tuple[int, int]:
        acceptors = [
            BalancedAcceptor(
                copies[slot],
                LoadBoard(path, slot),
                lambda slot=slot: _Recorder(held[slot]),
                held=lambda slot=slot: len(held[slot]),
            )
            for slot in range(2)
        ]
        for a in acceptors:
            a.start()
        clients = await _open_clients(listener.getsockname()[1], 40)
        await _settle(lambda: len(held[0]) + len(held[1]) == 40)
        for a in acceptors:
            a.stop()
        for c in clients:
            c.close()
        return len(held[0]), len(held[1])

    try:
        first, second = asyncio.run(scenario())
    finally:
        for sock in (listener, *copies):
            sock.close()
    # Without the board one acceptor can take them all; with it the split is even.
    assert abs(first - second) <= 2, (first, second)


def test_an_acceptor_whose_peer_never_accepts_still_takes_every_connection(
    tmp_path: Path,
) -> None:
    # The other slot reads 0 connections for ever (a stuck worker, or one killed before
    # it was withdrawn): each new connection waits one deferral, then this one takes it.
    path = tmp_path / "stuck.board"
    LoadBoard.create(path, 2)
    stuck = LoadBoard(path, 1)
    stuck.publish(0)
    listener = _listener()
    held: set[_Recorder] = set()

    async def scenario() -> int:
        acceptor = BalancedAcceptor(
            listener, LoadBoard(path, 0), lambda: _Recorder(held), held=lambda: len(held)
        )
        acceptor.start()
        clients = await _open_clients(listener.getsockname()[1], 10)
        await _settle(lambda: len(held) == 10)
        acceptor.stop()
        for c in clients:
            c.close()
        return acceptor.accepted

    try:
        assert asyncio.run(scenario()) == 10
    finally:
        stuck.close()
        listener.close()


def test_a_stopped_acceptor_withdraws_and_leaves_connections_in_the_backlog(
    tmp_path: Path,
) -> None:
    path = tmp_path / "stop.board"
    LoadBoard.create(path, 2)
    listener = _listener()
    held: set[_Recorder] = set()
    peer = LoadBoard(path, 1)
    seen_by_peer: list[int | None] = []

    async def scenario() -> int:
        acceptor = BalancedAcceptor(
            listener, LoadBoard(path, 0), lambda: _Recorder(held), held=lambda: len(held)
        )
        acceptor.start()
        seen_by_peer.append(peer.fewest_elsewhere())
        acceptor.stop()
        seen_by_peer.append(peer.fewest_elsewhere())
        clients = await _open_clients(listener.getsockname()[1], 3)
        await asyncio.sleep(0.1)
        for c in clients:
            c.close()
        return acceptor.accepted

    try:
        assert asyncio.run(scenario()) == 0
        assert seen_by_peer == [0, None]  # accepting with 0 connections, then withdrawn
        listener.setblocking(True)
        listener.settimeout(1)
        conn, _ = listener.accept()  # still there for whoever accepts next
        conn.close()
    finally:
        peer.close()
        listener.close()
