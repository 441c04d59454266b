"""Line figures shared by the zonal-mean, time-series and seasonal-cycle views.

Each curve carries options for both HoloViews backends: Bokeh draws the page, matplotlib
the PNG/SVG downloads.  The reference is a thick black line, each run its own colour.
"""

from __future__ import annotations

from collections.abc import Sequence

import holoviews as hv
import numpy as np

__all__ = ["BAND_COLOUR", "curve", "ensemble_bands", "line_figure", "range_band", "reference_band"]

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
    return range_band(curves, dim, xdim=xdim, ydim=ydim, label=f"reference spread ({', '.join(curves)})", colour=BAND_COLOUR, alpha=0.5)


def range_band(curves: dict, dim: str, *, xdim: hv.Dimension, ydim: hv.Dimension, label: str, colour: str, alpha: float) -> hv.Area:
    """A filled band from the lowest to the highest of several curves at each point of ``dim``.

    The curves are joined on the union of their coordinates; where only some have a value
    the band spans those, where none has one it has a gap.
    """
    import pandas as pd

    frame = pd.concat({name: pd.Series(da.values, index=da[dim].values) for name, da in curves.items()}, axis=1).sort_index()
    with np.errstate(all="ignore"):
        low, high = frame.min(axis=1, skipna=True), frame.max(axis=1, skipna=True)
    x = np.asarray(frame.index, dtype="float64")
    band = hv.Area((x, low.to_numpy(dtype="float64"), high.to_numpy(dtype="float64")), kdims=[xdim], vdims=[ydim, f"{ydim.name}_high"], label=label)
    return band.opts(color=colour, alpha=alpha, line_alpha=0.0, backend="bokeh").opts(color=colour, alpha=alpha, backend="matplotlib")


def ensemble_bands(members: dict, dim: str, *, xdim: hv.Dimension, ydim: hv.Dimension, colour) -> list[hv.Area]:
    """The range of each selected ensemble's members, in the ensemble's colour.

    Parameters
    ----------
    members
        Ensemble-mean name (``"<name> (ensemble mean)"``) -> {member name: 1-D DataArray along ``dim``}.
    colour
        ``colour(name)``: the line colour of a source (the ensemble mean's is its band's).

    Notes
    -----
    The ensemble mean itself is drawn as a line like a run; the band spans the members from
    their lowest to their highest value at each point (label: "<name>: members' range (N)").
    An ensemble with fewer than two members' curves has no band.
    """
    from evaluation.ensembles import MEAN_SUFFIX

    bands = []
    for name, curves in members.items():
        if len(curves) < 2:
            continue
        ensemble = name[: -len(MEAN_SUFFIX)] if name.endswith(MEAN_SUFFIX) else name
        bands.append(range_band(curves, dim, xdim=xdim, ydim=ydim, label=f"{ensemble}: members' range ({len(curves)})",
                                colour=colour(name), alpha=0.25))
    return bands


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
