"""Connection hygiene for the HTTP server: a header-read timeout and a connection cap.

The server's own HTTP/1.1 protocol has a keep-alive timeout but none for a request whose
header lines trickle in (one line every few seconds keeps a connection open forever), and its
concurrency limit answers 503 only once a request's headers are complete.  ``GuardedH11``
adds both checks at the connection level, per server process:

* a connection must deliver a complete request head within ``header_timeout_s`` of being
  opened or of its previous response (else it is closed);
* past ``max_connections`` open connections a new one is closed at once.

The body has its own deadline (setting BESTSCALE_BODY_TIMEOUT_S, service.api.middleware).
"""

from __future__ import annotations

import h11
from uvicorn.protocols.http.h11_impl import H11Protocol

from .settings import get_settings


class GuardedH11(H11Protocol):
    """The server's h11 protocol with the two limits (settings BESTSCALE_HEADER_TIMEOUT_S and
    BESTSCALE_MAX_CONNECTIONS, read once per process)."""

    _header_timer = None

    def connection_made(self, transport) -> None:
        s = get_settings()
        self.header_timeout_s, self.max_connections = s.header_timeout_s, s.max_connections
        super().connection_made(transport)
        if len(self.connections) > self.max_connections:
            self.logger.warning(
                "connection refused: %d open connections exceed the limit (setting "
                "BESTSCALE_MAX_CONNECTIONS)",
                len(self.connections) - 1,
            )
            transport.close()
            return
        self._arm_header_timer()

    def data_received(self, data: bytes) -> None:
        super().data_received(data)
        if self.conn.their_state is not h11.IDLE:  # the request head is complete
            self._disarm_header_timer()

    def on_response_complete(self) -> None:
        super().on_response_complete()
        if not self.transport.is_closing():
            self._arm_header_timer()  # the next request's head has the same deadline

    def connection_lost(self, exc) -> None:
        self._disarm_header_timer()
        super().connection_lost(exc)

    def _arm_header_timer(self) -> None:
        self._disarm_header_timer()
        self._header_timer = self.loop.call_later(self.header_timeout_s, self._header_timeout)

    def _disarm_header_timer(self) -> None:
        if self._header_timer is not None:
            self._header_timer.cancel()
            self._header_timer = None

    def _header_timeout(self) -> None:
        self._header_timer = None
        if self.conn.their_state is h11.IDLE and not self.transport.is_closing():
            self.transport.close()
