"""HoloViews' matplotlib backend (for PNG/SVG downloads) is loaded once even when two
pages ask for their first download at the same moment, and Bokeh stays the current backend.

Common practice: a lazily initialised shared resource is guarded by a lock with a second
check inside it (double-checked initialisation), so that two first callers do not both build it.
"""

from __future__ import annotations

import threading
import time

import holoviews as hv
import holoviews.plotting.bokeh  # noqa: F401  (the page's backend, registered with the Store)

from app.views import look


def test_two_first_calls_at_once_load_the_backend_once_and_leave_bokeh_current(monkeypatch) -> None:
    loads = []

    def extension(name, **options):  # stands for hv.extension: it makes the backend current
        loads.append(name)
        hv.Store.current_backend = name
        time.sleep(0.2)  # the other thread arrives while this one is loading

    monkeypatch.setattr(look, "_MATPLOTLIB_LOADED", threading.Event())  # a process that has not loaded it yet
    monkeypatch.setattr(look, "load_extensions", lambda: None)
    monkeypatch.setattr(look.hv, "extension", extension)
    monkeypatch.setattr(hv.Store, "current_backend", "bokeh")
    start = threading.Barrier(2)
    threads = [threading.Thread(target=lambda: (start.wait(), look.load_matplotlib())) for _ in range(2)]
    for thread in threads:
        thread.start()
    for thread in threads:
        thread.join(timeout=10)
    assert loads == ["matplotlib"]
    assert hv.Store.current_backend == "bokeh"
    look.load_matplotlib()  # loaded: returns at once
    assert loads == ["matplotlib"]
