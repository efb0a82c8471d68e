"""The HTTP side of a selection: what only a web request has (its connection).

The selection itself -- rows, search, groups, trust, finishing touches -- is
``service/selection/request.py``; the request becomes its options in ``options.py``.
"""

from __future__ import annotations

from collections.abc import Callable

import anyio.from_thread
from fastapi import Request


def disconnect_probe(request: Request) -> Callable[[], bool]:
    """``() -> bool`` for a computing thread: True once the client has gone away.

    Runs ``request.is_disconnected`` on the event loop from the route's worker thread; the
    search asks it between candidates (at most a few times a second), so a caller that hung
    up frees its compute slot instead of holding it to the time limit.
    """

    def gone() -> bool:
        try:
            return bool(anyio.from_thread.run(request.is_disconnected))
        except RuntimeError:  # not in a worker thread of the event loop
            return False

    return gone
