"""What the benchmark scripts share to run a served dashboard: a free port and the wait
until the server answers (benchmarks/run.py, benchmarks/sessions.py)."""

from __future__ import annotations

import socket
import subprocess
import time
import urllib.request


def free_port() -> int:
    """A TCP port on 127.0.0.1 nobody listens on now."""
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


def wait_until_live(port: int, process: subprocess.Popen, *, deadline: float, poll: float, why: str) -> None:
    """Return once ``/liveness`` of the server on ``port`` answers 200; raise RuntimeError
    with ``why`` when ``process`` has ended or ``time.monotonic()`` passes ``deadline``.
    ``poll`` is the pause between tries (short where the time to listening is measured)."""
    while True:
        try:
            with urllib.request.urlopen(f"http://127.0.0.1:{port}/liveness", timeout=2) as reply:
                if reply.status == 200:
                    return
        except OSError:
            pass
        if process.poll() is not None or time.monotonic() > deadline:
            raise RuntimeError(why)
        time.sleep(poll)
