"""Coastlines drawn from the bundled land-fraction grid, without any network access.

Map libraries fetch coastline shapes from the internet at run time, which fails on a
closed network.  The 0.5 contour of the land fraction the core ships with is a clean
outline of the continents and costs a few milliseconds once per server.

The 1-degree grid is used: a map on the page is about 500 pixels wide, so finer outlines
add nothing visible, while their points travel to the browser with every map (the
0.25-degree outline has 24 000 points and slowed the first drawing by seconds).
"""

from __future__ import annotations

import functools

import contourpy
import holoviews as hv
import numpy as np

__all__ = ["coastline_lines", "coastline_path", "coastline_segments"]

#: Polylines with fewer points than this are small islands and speckle; at 1 degree
#: dropping them keeps ~50 lines (95 % of the ~4 500 points) and the picture stays clean.
_MIN_POINTS = 8


@functools.lru_cache(maxsize=1)
def coastline_segments() -> tuple[np.ndarray, ...]:
    """The coastline as polylines of (lon, lat) vertices.

    Returns
    -------
    tuple of ndarray
        One ``(n, 2)`` array per polyline, longitude in [-180, 180).

    Notes
    -----
    Read once per process (the result is cached).  Cells whose land fraction is NaN
    would open gaps in the contour; the bundled file has none.
    """
    from evaluation.regions import bundled_land_fraction

    # the core's copy of the bundled 1° land fraction: read once per process, under the lock
    # every open of the core takes (netCDF-C is not thread-safe, pydata/xarray#4100)
    ds = bundled_land_fraction()
    lon = ds["lon"].values
    lat = ds["lat"].values
    frac = ds["sftlf"].values
    lines = contourpy.contour_generator(lon, lat, frac, line_type=contourpy.LineType.Separate).lines(0.5)
    return tuple(np.asarray(line) for line in lines if len(line) >= _MIN_POINTS)


@functools.lru_cache(maxsize=1)
def _joined() -> np.ndarray:
    # One array with NaN rows between the polylines: HoloViews handles a hundred separate
    # paths as a hundred datasets (a second per map), a single broken line in milliseconds.
    gap = np.full((1, 2), np.nan)
    return np.concatenate([part for seg in coastline_segments() for part in (seg, gap)])


@functools.lru_cache(maxsize=1)
def coastline_lines() -> dict[str, np.ndarray]:
    """The coastlines as the columns ``x`` and ``y`` of one Bokeh line broken by NaN.

    A Bokeh line glyph breaks at NaN, so one glyph on one data source draws every polyline
    (a MultiLine would carry one list per polyline).  Single precision: a map is a few
    hundred pixels wide, and the ~4 500 points travel to each page at half the size.
    The arrays are shared by every page of the process and must not be changed.
    """
    joined = _joined().astype("float32")
    x, y = np.ascontiguousarray(joined[:, 0]), np.ascontiguousarray(joined[:, 1])
    x.flags.writeable = False
    y.flags.writeable = False
    return {"x": x, "y": y}


def coastline_path() -> hv.Overlay:
    """The coastlines as a thin dark line on a light halo, readable on any palette.

    Drawn as curves broken by NaN rows, not as ``hv.Path``: HoloViews computes a path's
    ranges through one dataset per piece on every drawing, which made the coastlines a
    third of the cost of rendering the maps (0.68 against 0.49 CPU-s for four maps with
    their coastlines, measured on the sample); the lines on the page are the same.
    """
    joined = _joined()
    points = (joined[:, 0], joined[:, 1])
    halo = hv.Curve(points, kdims=["lon"], vdims=["lat"]).opts(color="#ffffff", line_width=2.2, alpha=0.55, tools=[], backend="bokeh").opts(
        color="#ffffff", linewidth=1.4, alpha=0.55, backend="matplotlib"
    )
    line = hv.Curve(points, kdims=["lon"], vdims=["lat"]).opts(color="#1f2933", line_width=0.8, alpha=0.9, tools=[], backend="bokeh").opts(
        color="#1f2933", linewidth=0.5, backend="matplotlib"
    )
    return halo * line
