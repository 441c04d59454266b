"""Is a served dashboard up: a free port and the wait on its ``/liveness`` route.

For whatever starts a server and must know when it answers (the browser tests, which serve
in a thread, and the benchmarks, which start ``gridscore serve`` processes).  Standard
library only, so that importing it costs nothing.
"""

from __future__ import annotations

import socket
import time
import urllib.request
from collections.abc import Callable

__all__ = ["free_port", "wait_until_live"]


def free_port() -> int:
    """A TCP port on 127.0.0.1 nobody listens on now."""
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as sock:
        sock.bind(("127.0.0.1", 0))
        return int(sock.getsockname()[1])


def wait_until_live(port: int, *, deadline: float, poll: float, why: str, stopped: Callable[[], bool] = lambda: False) -> None:
    """Return once ``/liveness`` of the server on 127.0.0.1:``port`` answers 200.

    Raises RuntimeError with ``why`` when ``stopped()`` says the server has ended or
    ``time.monotonic()`` passes ``deadline``; ``poll`` is the pause between tries (short
    where the time to listening is measured).
    """
    while True:
        try:
            with urllib.request.urlopen(f"http://127.0.0.1:{port}/liveness", timeout=2) as reply:
                if reply.status == 200:
                    return
        except OSError:
            pass
        if stopped() or time.monotonic() > deadline:
            raise RuntimeError(why)
        time.sleep(poll)
