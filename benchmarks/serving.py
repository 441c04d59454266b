"""What the benchmark scripts share to run a served dashboard: a free port and the wait
until the server answers (benchmarks/run.py, benchmarks/sessions.py)."""

from __future__ import annotations

import subprocess

from app.liveness import free_port
from app.liveness import wait_until_live as _wait_until_live

__all__ = ["free_port", "wait_until_live"]


def wait_until_live(port: int, process: subprocess.Popen, *, deadline: float, poll: float, why: str) -> None:
    """Return once ``/liveness`` of the server on ``port`` answers 200; raise RuntimeError
    with ``why`` when ``process`` has ended or ``time.monotonic()`` passes ``deadline``.
    ``poll`` is the pause between tries (short where the time to listening is measured)."""
    _wait_until_live(port, deadline=deadline, poll=poll, why=why, stopped=lambda: process.poll() is not None)
