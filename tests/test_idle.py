"""wait_until_idle: it returns only when the dashboard's background work is over.

Outside reference: the Python documentation of concurrent.futures, Future.result(timeout):
"If the call hasn't completed in timeout seconds, then a TimeoutError will be raised".
"""

from __future__ import annotations

from concurrent.futures import Future

import pytest

from app.views import results


def test_background_work_still_running_after_the_timeout_is_not_taken_for_idle() -> None:
    running: Future = Future()  # a chain of background steps that has not ended
    results._CHAINS.add(running)
    try:
        with pytest.raises(TimeoutError):
            results.wait_until_idle(timeout=0.05)
    finally:
        running.set_result(None)
    results.wait_until_idle(timeout=5.0)  # ended: returns
