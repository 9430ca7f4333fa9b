"""TCP_NODELAY on accepted connections, whatever bound the listening socket."""

from __future__ import annotations

import asyncio
import socket

from uvicorn.config import Config
from uvicorn.server import ServerState

from service.http_protocol import NoDelayHTTPProtocol


async def _app(scope, receive, send):  # pragma: no cover - never called
    raise AssertionError


class _Transport(asyncio.Transport):
    def __init__(self, sock: socket.socket) -> None:
        super().__init__()
        self._sock = sock

    def get_extra_info(self, name, default=None):
        return {"socket": self._sock, "peername": ("127.0.0.1", 1),
                "sockname": ("127.0.0.1", 2)}.get(name, default)


def test_connection_gets_tcp_nodelay():
    # A socket made as uvicorn's multiprocess supervisor makes it (protocol number 0),
    # so asyncio leaves TCP_NODELAY off (Kludex/uvicorn#3149); the protocol sets it.
    listener = socket.socket(socket.AF_INET, socket.SOCK_STREAM, 0)
    listener.bind(("127.0.0.1", 0))
    listener.listen(1)
    client = socket.create_connection(listener.getsockname(), timeout=5)
    conn, _ = listener.accept()
    try:
        assert conn.getsockopt(socket.IPPROTO_TCP, socket.TCP_NODELAY) == 0
        loop = asyncio.new_event_loop()
        try:
            config = Config(_app, log_config=None)
            protocol = NoDelayHTTPProtocol(config, ServerState(), {}, _loop=loop)
            protocol.connection_made(_Transport(conn))
        finally:
            loop.close()
        assert conn.getsockopt(socket.IPPROTO_TCP, socket.TCP_NODELAY) == 1
    finally:
        for s in (client, conn, listener):
            s.close()
