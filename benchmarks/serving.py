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


#: JavaScript helpers for tests evaluated inside a page.  Panel's components live in shadow
#: DOM; ``find(root, selector, [])`` walks every open shadow root, as Playwright's CSS
#: locators do, and ``within(elements, selector)`` is Playwright's "A B" from ``elements``.
SHADOW_FIND_JS = """
  const find = (root, selector, out) => {
    for (const el of root.querySelectorAll(selector)) out.push(el);
    for (const el of root.querySelectorAll("*")) if (el.shadowRoot) find(el.shadowRoot, selector, out);
    return out;
  };
  const within = (elements, selector) => elements.flatMap(e => e.shadowRoot ? find(e.shadowRoot, selector, find(e, selector, [])) : find(e, selector, []));
"""
