"""uvicorn's HTTP protocol with TCP_NODELAY set on every accepted connection.

With ``--workers`` > 1, uvicorn's supervisor binds the listening socket itself, with
protocol number 0, and asyncio then does not set TCP_NODELAY on the connections it
accepts (Kludex/uvicorn#3149): each keep-alive response waits about 40 ms for the
client's delayed ACK (measured: the bare floor endpoint's p50 went from 1.2 to 44 ms).
Setting the option per connection works whatever bound the socket.
"""

from __future__ import annotations

import asyncio
import socket

try:  # uvicorn[standard]
    from uvicorn.protocols.http.httptools_impl import HttpToolsProtocol as _Base
except ImportError:  # pragma: no cover - plain uvicorn
    from uvicorn.protocols.http.h11_impl import H11Protocol as _Base  # type: ignore[assignment]

__all__ = ["NoDelayHTTPProtocol"]


class NoDelayHTTPProtocol(_Base):  # type: ignore[misc, valid-type]
    """The HTTP protocol uvicorn would pick, plus TCP_NODELAY on TCP connections."""

    def connection_made(self, transport: asyncio.Transport) -> None:  # type: ignore[override]
        sock = transport.get_extra_info("socket")
        if sock is not None and sock.family in (socket.AF_INET, socket.AF_INET6):
            try:
                sock.setsockopt(socket.IPPROTO_TCP, socket.TCP_NODELAY, 1)
            except OSError:  # pragma: no cover - a socket that refuses the option
                pass
        super().connection_made(transport)
