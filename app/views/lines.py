"""Line figures shared by the zonal-mean, time-series and seasonal-cycle views.

Each curve carries options for both HoloViews backends: Bokeh draws the page, matplotlib
the PNG/SVG downloads.  The reference is a thick black line, each run its own colour.
"""

from __future__ import annotations

from collections.abc import Sequence

import holoviews as hv
import numpy as np

__all__ = ["BAND_COLOUR", "curve", "line_figure", "reference_band"]

#: Fill of the references' spread (a grey that a thick black reference line stays visible on).
BAND_COLOUR = "#8b8f98"

_MPL_DASH = {"solid": "-", "dashed": "--", "dotted": ":"}


def curve(
    x: Sequence[float] | np.ndarray,
    y: Sequence[float] | np.ndarray,
    *,
    label: str,
    colour: str,
    xdim: hv.Dimension,
    ydim: hv.Dimension,
    reference: bool = False,
    dash: str = "solid",
) -> hv.Curve:
    """One labelled line; NaN values leave a gap (nothing is interpolated)."""
    line = hv.Curve((np.asarray(x, dtype="float64"), np.asarray(y, dtype="float64")), kdims=[xdim], vdims=[ydim], label=label)
    width = 3.0 if reference else 2.0
    return line.opts(color=colour, line_width=width, line_dash=dash, tools=["hover"], backend="bokeh").opts(
        color=colour, linewidth=width * 0.75, linestyle=_MPL_DASH[dash], backend="matplotlib"
    )


def reference_band(curves: dict, dim: str, *, xdim: hv.Dimension, ydim: hv.Dimension) -> hv.Area | None:
    """The spread of several references: a filled band from their lowest to their highest value.

    Parameters
    ----------
    curves
        Reference name -> 1-D DataArray along ``dim`` (the primary and the alternatives).
    dim
        The shared dimension (``year``, ``month`` or ``lat``).

    Notes
    -----
    The curves are joined on the union of their coordinates; where only some references
    have a value the band spans those, where none has one it has a gap.  ``None`` for fewer
    than two references.  The band's label names every reference (as text).
    """
    if len(curves) < 2:
        return None
    import pandas as pd

    frame = pd.concat({name: pd.Series(da.values, index=da[dim].values) for name, da in curves.items()}, axis=1).sort_index()
    with np.errstate(all="ignore"):
        low, high = frame.min(axis=1, skipna=True), frame.max(axis=1, skipna=True)
    label = f"reference spread ({', '.join(curves)})"
    x = np.asarray(frame.index, dtype="float64")
    band = hv.Area((x, low.to_numpy(dtype="float64"), high.to_numpy(dtype="float64")), kdims=[xdim], vdims=[ydim, f"{ydim.name}_high"], label=label)
    return band.opts(color=BAND_COLOUR, alpha=0.5, line_alpha=0.0, backend="bokeh").opts(color=BAND_COLOUR, alpha=0.5, backend="matplotlib")


def line_figure(curves: list[hv.Element], *, title: str, xticks: list | None = None, xlim: tuple | None = None) -> hv.Overlay:
    """Overlay the curves with a legend outside the plot, readable at any width."""
    from .base import plot_title

    title = plot_title(title)  # names in titles keep their braces (HoloViews formats titles)
    overlay = hv.Overlay(curves)
    bokeh = dict(
        title=title,
        responsive=True,
        height=430,
        legend_position="right",
        show_grid=True,
        toolbar="above",
        backend="bokeh",
    )
    mpl = dict(title=title, fig_inches=(8, 4.2), legend_position="right", show_grid=True, backend="matplotlib")
    if xticks is not None:
        bokeh["xticks"] = mpl["xticks"] = xticks
    if xlim is not None:
        bokeh["xlim"] = mpl["xlim"] = xlim
    return overlay.opts(**bokeh).opts(**mpl)
