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


def test_a_bug_in_the_background_work_is_logged_as_an_error(monkeypatch, caplog, tmp_path) -> None:
    # logging's levels (Python documentation): ERROR is shown by a default configuration, DEBUG is not
    import logging

    from cfdata import write_cf

    from evaluation.catalog import Collection

    for folder, offset in (("references/obs", 0.0), ("runs/a", 1.0)):
        (tmp_path / folder).mkdir(parents=True)
        write_cf(tmp_path / folder / "tas.nc", dlat=30.0, years=2, offset=offset)
    monkeypatch.setenv("GRIDSCORE_CACHE", "off")
    served = results.Results(Collection.from_path(tmp_path))

    def broken(*args, **kwargs):
        raise ZeroDivisionError("a bug")

    monkeypatch.setattr(served, "variables", broken)
    try:
        with caplog.at_level(logging.DEBUG, logger="gridscore.app"):
            served.warm().result(timeout=30)
        assert [r.levelno for r in caplog.records if "background work stopped" in r.getMessage()] == [logging.ERROR]
    finally:
        served.close()
