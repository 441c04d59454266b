"""Line figures shared by the zonal-mean, time-series and seasonal-cycle views.

Each curve carries options for both HoloViews backends: Bokeh draws the page, matplotlib
the PNG/SVG downloads.  The reference is a thick black line, each run its own colour.
"""

from __future__ import annotations

from collections.abc import Sequence

import holoviews as hv
import numpy as np

__all__ = ["curve", "line_figure"]

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


def line_figure(curves: list[hv.Element], *, title: str, xticks: list | None = None, xlim: tuple | None = None) -> hv.Overlay:
    """Overlay the curves with a legend outside the plot, readable at any width."""
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
