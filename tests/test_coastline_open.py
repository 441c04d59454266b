"""The coastlines are read while the collection is opened on another thread: their NetCDF
open waits for the core's open lock (netCDF-C is not thread-safe; pydata/xarray#4100)."""

from __future__ import annotations

import threading

import numpy as np

from app.views import coastlines
from evaluation.io import _OPEN_LOCK
from evaluation.regions import bundled_land_fraction


def test_the_coastline_file_is_opened_only_while_no_other_open_holds_the_lock() -> None:
    coastlines.coastline_segments.cache_clear()
    bundled_land_fraction.cache_clear()  # the file the coastlines are drawn from, read again
    done = threading.Event()
    found: list = []

    def read() -> None:
        found.append(coastlines.coastline_segments())
        done.set()

    with _OPEN_LOCK:  # another thread is opening a file of the collection
        reader = threading.Thread(target=read, daemon=True)
        reader.start()
        assert not done.wait(1.0)  # the coastlines wait for that open to end
    assert done.wait(60.0)
    reader.join(5.0)
    lines = found[0]
    # common practice: the 0.5 contour of a land fraction outlines the continents; every
    # vertex is a longitude in [-180, 180] and a latitude in [-90, 90]
    assert len(lines) > 10
    points = np.concatenate(lines)
    assert np.all((points[:, 0] >= -180) & (points[:, 0] <= 180)) and np.all((points[:, 1] >= -90) & (points[:, 1] <= 90))
