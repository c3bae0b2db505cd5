"""A uvicorn server of a worker pool: its connections come from a BalancedAcceptor."""

from __future__ import annotations

import asyncio
import socket
from pathlib import Path

import uvicorn

from service.api.balanced_accept import BalancedAcceptor, LoadBoard

__all__ = ["PoolServer"]


class PoolServer(uvicorn.Server):
    """uvicorn with no listening socket of its own: the pool's shared socket is watched
    by a `BalancedAcceptor`, which hands each accepted connection to uvicorn's HTTP
    protocol. uvicorn's shutdown still waits for those connections (they register in
    its ``server_state`` as any other)."""

    def __init__(
        self, config: uvicorn.Config, listener: socket.socket, board: Path, slot: int
    ) -> None:
        super().__init__(config)
        self._listener = listener
        self._board_path = board
        self._slot = slot
        self.acceptor: BalancedAcceptor | None = None

    async def startup(self, sockets: list[socket.socket] | None = None) -> None:
        await super().startup(sockets=[])
        loop = asyncio.get_running_loop()
        protocol_class = self.config.http_protocol_class

        def protocol() -> asyncio.Protocol:
            return protocol_class(  # type: ignore[call-arg, no-any-return]
                config=self.config,
                server_state=self.server_state,
                app_state=self.lifespan.state,
                _loop=loop,
            )

        self.acceptor = BalancedAcceptor(
            self._listener,
            LoadBoard(self._board_path, self._slot),
            protocol,
            held=lambda: len(self.server_state.connections),
        )
        self.acceptor.start()

    async def shutdown(self, sockets: list[socket.socket] | None = None) -> None:
        if self.acceptor is not None:
            self.acceptor.stop()
        await super().shutdown(sockets)
