"""Maps of the chosen field for the reference and the selected runs.

One map per source, side by side with linked zoom, on the comparison's target grid,
coastlines from the bundled land fraction, a colour bar, a sequential palette for means
and a diverging one centred on zero for differences and trends.  Each field can be
downloaded as CF NetCDF; the box-select tool on a map sets a box region.

Bias maps (run minus reference), trend maps and trend-difference maps are stippled where
the value stands out from interannual variability under false-discovery-rate control
(:meth:`evaluation.scoring.Comparison.significance_mask`); the download carries the
stippling as a CF flag variable beside the field.
"""

from __future__ import annotations

import io
import math
from collections.abc import Callable
from typing import Any

import holoviews as hv
import numpy as np
import panel as pn
import xarray as xr
from bokeh.events import SelectionGeometry
from bokeh.layouts import gridplot
from bokeh.models import (
    BasicTickFormatter,
    BoxSelectTool,
    BoxZoomTool,
    ColorBar,
    ColumnDataSource,
    FixedTicker,
    Grid,
    HoverTool,
    LinearColorMapper,
    PanTool,
    PlainText,
    Range1d,
    ResetTool,
    SaveTool,
    WheelZoomTool,
)
from bokeh.plotting import figure as bokeh_figure

from evaluation.export import field_bytes, provenance_for
from evaluation.regions import parse_region
from evaluation.significance import FDR_LEVEL

from ..state import Request
from .base import ResultView, plot_title, safe_filename, text_tooltip
from .coastlines import coastline_lines, coastline_path
from .look import DIVERGING, SEQUENTIAL
from .results import MapField

__all__ = ["MapsView", "colour_range", "display_grid", "map_extent", "map_element", "region_outline", "stipple_points", "STIPPLE_LEGEND"]

#: More cells than this per map are averaged in blocks for display (a 0.25° grid has
#: about a million); the download always carries the full field.
MAX_DISPLAY_CELLS = 300_000


def colour_range(fields: list[xr.DataArray], *, signed: bool) -> tuple[float, float] | None:
    """One colour range for all maps of a kind, so that equal colours mean equal values.

    Returns
    -------
    tuple or None
        ``(low, high)``; symmetric about zero when ``signed``; ``None`` when no field has a
        finite value.

    Notes
    -----
    NaN cells are ignored.  A constant field (for instance a run compared with itself:
    a difference of zero everywhere) would give a zero-width range, which breaks the
    colour bar (holoviz/holoviews#3373); it is widened to ±1 around zero, or by 1 % of
    the value (at least 1) around a non-zero constant.
    """
    values = [np.asarray(f.values, dtype="float64") for f in fields]
    finite = [v[np.isfinite(v)] for v in values]
    finite = [v for v in finite if v.size]
    if not finite:
        return None
    low = float(min(v.min() for v in finite))
    high = float(max(v.max() for v in finite))
    if signed:
        top = max(abs(low), abs(high))
        return (-top, top) if top > 0 else (-1.0, 1.0)
    if high > low:
        return low, high
    pad = max(abs(low) * 0.01, 1.0) if low != 0 else 1.0
    return low - pad, high + pad


def display_grid(field: xr.DataArray) -> xr.DataArray:
    """The field with latitude ascending and, if it is large, block-averaged for display.

    Notes
    -----
    Only for drawing: a browser cannot usefully show more cells than it has pixels, and
    sending a million cells per map makes every redraw slow.  NaN cells are left out of
    each block mean (a block of only NaN stays NaN).
    """
    field = field.sortby("lat").sortby("lon")
    cells = field.sizes["lat"] * field.sizes["lon"]
    if cells <= MAX_DISPLAY_CELLS:
        return field
    factor = math.ceil(math.sqrt(cells / MAX_DISPLAY_CELLS))
    return field.coarsen(lat=factor, lon=factor, boundary="trim").mean()  # NaN-skipping for floats


#: At most this many rows and columns of dots (one per 5° at most): on a finer grid the
#: mask is thinned by majority over blocks, as stippling is usually drawn, so that the
#: colours between the dots stay readable.
MAX_STIPPLE_ROWS, MAX_STIPPLE_COLUMNS = 36, 72
#: The legend of the stippling (the false-discovery level of evaluation.significance).
STIPPLE_LEGEND = f"dots: significant at FDR {FDR_LEVEL * 100:g} % (Wilks 2016)"


def stipple_points(flags: xr.DataArray) -> tuple[np.ndarray, np.ndarray]:
    """Longitudes and latitudes of the dots for a significance flag field (2 = significant).

    Notes
    -----
    A grid finer than :data:`MAX_STIPPLE_ROWS` x :data:`MAX_STIPPLE_COLUMNS` is cut into
    blocks; a dot marks a block more than half of whose tested cells are significant, at
    the block's centre, so the dots stay apart and the colours between them readable.
    """
    flags = flags.sortby("lat").sortby("lon")
    factor = max(1, math.ceil(max(flags.sizes["lat"] / MAX_STIPPLE_ROWS, flags.sizes["lon"] / MAX_STIPPLE_COLUMNS)))
    significant = (flags == 2).astype("float64")
    tested = (flags > 0).astype("float64")
    if factor > 1:
        share = significant.coarsen(lat=factor, lon=factor, boundary="trim").sum() / tested.coarsen(lat=factor, lon=factor, boundary="trim").sum()
        dots = share.fillna(0.0) > 0.5
    else:
        dots = significant > 0.5
    lat, lon = xr.broadcast(dots["lat"], dots["lon"])
    keep = dots.transpose("lat", "lon").values
    return lon.transpose("lat", "lon").values[keep], lat.transpose("lat", "lon").values[keep]


def stipple_element(flags: xr.DataArray) -> hv.Points:
    """Small dark dots with a light rim, readable on both ends and the middle of the palettes."""
    lon, lat = stipple_points(flags)
    lon = np.where(lon >= 180.0, lon - 360.0, lon)  # the maps' longitudes run -180..180
    points = hv.Points((lon, lat), kdims=["lon", "lat"])
    return points.opts(color="#111111", size=3, line_color="#ffffff", line_width=0.4, tools=[], show_legend=False, backend="bokeh").opts(
        color="#111111", s=2, edgecolors="none", show_legend=False, backend="matplotlib")


def _regular(values: np.ndarray) -> bool:
    steps = np.diff(values)
    return steps.size == 0 or bool(np.allclose(steps, steps[0], rtol=1e-3, atol=1e-6))


def map_element(item: MapField, *, clim: tuple[float, float], units: str) -> hv.Element:
    """A map of one field with coastlines; hv.Image for regular grids, QuadMesh otherwise."""
    field = display_grid(item.data)
    kdims = [hv.Dimension("lon", label="Longitude", unit="°E"), hv.Dimension("lat", label="Latitude", unit="°N")]
    vdim = hv.Dimension("value", label=item.quantity, unit=units)
    lon, lat = field["lon"].values, field["lat"].values
    data = (lon, lat, np.asarray(field.values, dtype="float64"))
    if _regular(lon) and _regular(lat):
        element = hv.Image(data, kdims=kdims, vdims=[vdim])
    else:  # Gaussian or other uneven grids: hv.Image would misplace rows (holoviz/holoviews#1869)
        element = hv.QuadMesh(data, kdims=kdims, vdims=[vdim])
    palette = DIVERGING if item.signed else SEQUENTIAL
    element = element.opts(
        cmap=palette,
        clim=clim,
        colorbar=True,
        title=plot_title(item.title),
        backend="bokeh",
    ).opts(
        tools=["hover", "box_select"],
        clipping_colors={"NaN": "transparent"},
        colorbar_opts={"title": units},
        responsive=True,
        aspect=2,
        min_height=220,
        xlim=(-180, 180),
        ylim=(-90, 90),
        xticks=[-180, -120, -60, 0, 60, 120, 180],
        yticks=[-90, -60, -30, 0, 30, 60, 90],
        active_tools=["pan", "wheel_zoom"],
        backend="bokeh",
    ).opts(
        cmap=palette,
        clim=clim,
        colorbar=True,
        title=plot_title(item.title),
        clipping_colors={"NaN": (1.0, 1.0, 1.0, 0.0)},
        aspect=2,
        fig_inches=(7, 3.6),
        xticks=[-180, -120, -60, 0, 60, 120, 180],
        yticks=[-90, -60, -30, 0, 30, 60, 90],
        backend="matplotlib",
    )
    return element * coastline_path()


def region_boxes(region: str) -> list[tuple[float, float, float, float]]:
    """``(west, south, east, north)`` of the rectangles around the selected region.

    None for global, land or ocean.  A box whose west edge lies east of its east edge
    crosses the date line and is two rectangles; longitudes are brought into [-180, 180)
    like the maps'.
    """
    r = parse_region(region)
    boxes: list[tuple[float, float, float, float]] = []
    full = (r.west, r.east) == (-180.0, 180.0)
    if not (full and r.south == -90.0 and r.north == 90.0):
        west = ((r.west + 180.0) % 360.0) - 180.0
        east = ((r.east + 180.0) % 360.0) - 180.0 if r.east != 180.0 else 180.0
        if full or west < east:
            boxes.append((-180.0 if full else west, r.south, 180.0 if full else east, r.north))
        else:
            boxes += [(west, r.south, 180.0, r.north), (-180.0, r.south, east, r.north)]
    return boxes


def region_outline(region: str) -> hv.Overlay:
    """Dashed rectangles around the selected region (:func:`region_boxes`), for the figure export."""
    layers = [
        hv.Bounds(b).opts(color="#111111", line_width=1.5, line_dash="dashed", backend="bokeh").opts(
            color="#111111", linewidth=1.0, linestyle="--", backend="matplotlib")
        for b in region_boxes(region)
    ]
    return hv.Overlay(layers)


#: The maps that are stippled: bias maps, trend maps and trend-difference maps.
_STIPPLED = ("difference", "trend_map", "trend_difference")
#: How the dots are found, said under the maps.
STIPPLE_RULE = (
    "a two-sided t-test at every cell on the yearly season means (bias maps: run against reference, "
    "two-sample; trend maps: least-squares trend; trend-difference maps: run trend minus reference trend "
    "over both slopes' standard errors), with sample sizes reduced for lag-1 autocorrelation "
    f"(Santer et al. 2000), and the Benjamini-Hochberg false discovery rate held at {FDR_LEVEL * 100:g} % over all tested "
    "cells of the map (Wilks 2016). Undotted cells are not shown to agree: their difference or trend is "
    "within interannual variability. The NetCDF downloads carry the dots as a flag variable."
)


def with_mask(field: xr.DataArray, mask: xr.DataArray | None, variable: str) -> xr.DataArray | xr.Dataset:
    """The field, and beside it its stippling as a CF flag variable (``ancillary_variables``)."""
    if mask is None:
        return field
    name = str(field.name or variable)
    out = field.to_dataset(name=name)
    out[str(mask.name)] = mask
    out[name].attrs["ancillary_variables"] = str(mask.name)
    return out


_QUANTITY = {"climatology": "Mean", "difference": "Difference", "trend_map": "Trend", "trend_difference": "Trend difference"}


def _title(kind: str, source: str, reference: str) -> str:
    return {
        "climatology": f"{source} mean",
        "difference": f"{source} minus {reference}",
        "trend_map": f"{source} trend",
        "trend_difference": f"{source} trend minus {reference} trend",
    }[kind]


# ---------------------------------------------------------------------------- the page's maps
# The page draws its maps as plain Bokeh models, built once per layout (the number and kind
# of the maps) and updated in place when only their numbers change (season, period, region,
# reference, variable): new arrays into the data sources, a new range into the colour mapper,
# new titles, no new models.  Drawn through HoloViews, four maps were ~280 Bokeh models and
# ~0.9 CPU-s of the server's event loop per drawing (71 % of that loop with ten sessions
# open, py-spy, 2026-12-02), and every season or field picked drew them all again.
# HoloViews still draws the PNG/SVG figure (matplotlib), from elements built only when a
# download asks for it (MapsView.figure).

_XTICKS = [-180, -120, -60, 0, 60, 120, 180]
_YTICKS = [-90, -60, -30, 0, 30, 60, 90]
#: The delimiters of TeX that Bokeh typesets in a title or label given as a string.
_TEX = ("$$", "\\[", "\\]", "\\(", "\\)")


def canvas_text(text: Any) -> str | PlainText:
    """A name for a Bokeh title or colour-bar label, drawn as written.

    Bokeh paints titles and labels on the canvas (never HTML), but typesets a string that
    holds TeX delimiters (``$$...$$``, ``\\[...\\]``, ``\\(...\\)``) with MathJax; such a
    name is wrapped in :class:`~bokeh.models.PlainText`, which Bokeh draws as it is.
    """
    text = str(text)
    return PlainText(text=text) if any(d in text for d in _TEX) else text


def _step(values: np.ndarray) -> float:
    return float(values[1] - values[0]) if values.size > 1 else 1.0


def image_columns(field: xr.DataArray) -> dict[str, list]:
    """The columns of a Bokeh ``image`` glyph for a field on a regular grid.

    ``field`` comes from :func:`display_grid` (latitude ascending, so the first row is
    the southernmost, Bokeh's default origin).  Single precision: about seven digits, more
    than a colour or a hover value shows, at half the bytes per map sent to each page.
    """
    lon = np.asarray(field["lon"].values, dtype="float64")
    lat = np.asarray(field["lat"].values, dtype="float64")
    dx, dy = _step(lon), _step(lat)
    values = np.ascontiguousarray(field.transpose("lat", "lon").values, dtype="float32")
    return {"image": [values], "x": [lon[0] - dx / 2], "y": [lat[0] - dy / 2], "dw": [dx * lon.size], "dh": [dy * lat.size]}


def _edges(centres: np.ndarray, low: float, high: float) -> np.ndarray:
    """Cell edges half-way between the centres (the outer ones as far out as the next)."""
    if centres.size == 1:
        return np.array([centres[0] - 0.5, centres[0] + 0.5])
    middle = (centres[1:] + centres[:-1]) / 2
    return np.clip(np.concatenate([[2 * centres[0] - middle[0]], middle, [2 * centres[-1] - middle[-1]]]), low, high)


def quad_columns(field: xr.DataArray) -> dict[str, np.ndarray]:
    """The columns of a Bokeh ``quad`` glyph, one rectangle per cell, for an uneven grid.

    A Gaussian grid's rows are unevenly spaced; an image would misplace them
    (holoviz/holoviews#1869 is the same limit), so each cell is drawn between the
    mid-points of its neighbours' centres.
    """
    lon = np.asarray(field["lon"].values, dtype="float64")
    lat = np.asarray(field["lat"].values, dtype="float64")
    x, y = _edges(lon, -540.0, 540.0), _edges(lat, -90.0, 90.0)
    left, bottom = np.meshgrid(x[:-1], y[:-1])
    right, top = np.meshgrid(x[1:], y[1:])
    values = np.asarray(field.transpose("lat", "lon").values, dtype="float32").ravel()
    return {"left": left.ravel(), "right": right.ravel(), "bottom": bottom.ravel(), "top": top.ravel(), "value": values}


def dot_columns(flags: xr.DataArray) -> dict[str, np.ndarray]:
    """The dots of a significance flag field (:func:`stipple_points`), longitudes in -180..180."""
    lon, lat = stipple_points(flags)
    lon = np.where(lon >= 180.0, lon - 360.0, lon)
    return {"x": np.asarray(lon, dtype="float32"), "y": np.asarray(lat, dtype="float32")}


def _box_setter(selection: Any) -> Callable[[SelectionGeometry], None]:
    """What the box-select tool does: the drawn box becomes the region.

    A plain function of the selection, not a bound method of the view, so that the
    figures' event callbacks hold nothing of the view (holoviz/panel#4116).
    """

    def set_box(event: SelectionGeometry) -> None:
        geometry = event.geometry or {}
        if not event.final or geometry.get("type") != "rect":
            return
        try:
            west, east = sorted(float(geometry[k]) for k in ("x0", "x1"))
            south, north = sorted(float(geometry[k]) for k in ("y0", "y1"))
        except (KeyError, TypeError, ValueError):
            return
        south, north = max(-90.0, south), min(90.0, north)
        west, east = max(-180.0, west), min(180.0, east)
        if north - south < 1 or east - west < 1:
            return
        selection.region = f"box:{south:.0f},{north:.0f},{west:.0f},{east:.0f}"

    return set_box


def _ticks(low: float, high: float) -> list[float]:
    """Round degrees within ``low``..``high``, about four to seven of them."""
    step = next((d for d in (1, 2, 5, 10, 20, 30, 60) if (high - low) / d <= 7), 60)
    return [float(t) for t in np.arange(np.ceil(low / step) * step, high + 1e-9, step)]


def map_extent(columns: list[dict[str, Any]]) -> tuple[float, float, float, float]:
    """West, east, south and north of what the maps show, widened to the 2:1 shape of a
    whole-globe map (equal degrees across and up, as the globe is drawn).

    A regional grid (a limited-area model's domain on its own target grid) fills its box
    instead of lying as a small patch on the globe; a global one gives the globe.
    ``columns`` are :func:`image_columns` or :func:`quad_columns` of the maps.
    """
    west, east, south, north = 180.0, -180.0, 90.0, -90.0
    for c in columns:
        if "image" in c:
            if not c["x"]:
                continue
            lefts, rights = [c["x"][0]], [c["x"][0] + c["dw"][0]]
            bottoms, tops = [c["y"][0]], [c["y"][0] + c["dh"][0]]
        else:
            if len(c["left"]) == 0:
                continue
            lefts, rights, bottoms, tops = c["left"], c["right"], c["bottom"], c["top"]
        west, east = min(west, float(np.min(lefts))), max(east, float(np.max(rights)))
        south, north = min(south, float(np.min(bottoms))), max(north, float(np.max(tops)))
    west, east, south, north = max(west, -180.0), min(east, 180.0), max(south, -90.0), min(north, 90.0)
    if east <= west or north <= south:
        return -180.0, 180.0, -90.0, 90.0
    width, height = east - west, north - south
    if width < 2 * height:  # widen the longitudes about the centre, within the globe
        width = min(2 * height, 360.0)
        middle = min(max((west + east) / 2, -180.0 + width / 2), 180.0 - width / 2)
        west, east = middle - width / 2, middle + width / 2
    else:  # widen the latitudes about the centre, within the poles
        height = min(width / 2, 180.0)
        middle = min(max((south + north) / 2, -90.0 + height / 2), 90.0 - height / 2)
        south, north = middle - height / 2, middle + height / 2
    return west, east, south, north


class MapFigures:
    """The Bokeh models of one layout of maps, and their update in place.

    ``shape`` holds, per map, whether its values are signed (diverging palette), whether it
    is stippled and whether its grid is regular (image) or not (one rectangle per cell);
    another shape needs other models, anything else is an :meth:`update`.
    """

    def __init__(self, shape: tuple[tuple[bool, bool, bool], ...], selection: Any) -> None:
        self.shape = shape
        signed = shape[0][0]
        x_range, y_range = Range1d(-180, 180), Range1d(-90, 90)  # shared by every map: linked zoom
        self.ranges, self.extent = (x_range, y_range), (-180.0, 180.0, -90.0, 90.0)
        x_ticks, y_ticks, formatter = FixedTicker(ticks=_XTICKS), FixedTicker(ticks=_YTICKS), BasicTickFormatter()
        self.tickers = (x_ticks, y_ticks)
        # one colour range for all maps of a kind (colour_range): one mapper; NaN transparent
        self.mapper = LinearColorMapper(palette=DIVERGING if signed else SEQUENTIAL, low=-1.0, high=1.0, nan_color="rgba(0, 0, 0, 0)")
        self.coast = ColumnDataSource(coastline_lines())
        self.outline = ColumnDataSource({"left": [], "right": [], "bottom": [], "top": []})
        set_box = _box_setter(selection)
        self.figures: list[Any] = []
        self.sources: list[ColumnDataSource] = []
        self.dots: list[ColumnDataSource | None] = []
        self.hovers: list[HoverTool] = []
        self.bars: list[ColorBar] = []
        for _signed, stippled, regular in shape:
            fig = bokeh_figure(
                x_range=x_range, y_range=y_range, tools=[], toolbar_location=None, sizing_mode="scale_width", width=560, height=290,
                min_height=220, x_axis_label="Longitude (°E)", y_axis_label="Latitude (°N)",
            )
            fig.xaxis.ticker, fig.yaxis.ticker = x_ticks, y_ticks
            fig.xaxis.formatter = fig.yaxis.formatter = formatter
            fig.center = [r for r in fig.center if not isinstance(r, Grid)]  # no grid lines on a map (as before)
            if regular:
                source = ColumnDataSource({"image": [], "x": [], "y": [], "dw": [], "dh": []})
                shown = fig.image(image="image", x="x", y="y", dw="dw", dh="dh", source=source, color_mapper=self.mapper)
                value = "@image{%.4g}"
                formatters = {"@image": "printf"}
            else:
                source = ColumnDataSource({"left": [], "right": [], "bottom": [], "top": [], "value": []})
                shown = fig.quad(left="left", right="right", bottom="bottom", top="top", source=source, line_color=None,
                                 fill_color={"field": "value", "transform": self.mapper})
                value = "@value{%.4g}"
                formatters = {"@value": "printf"}
            fig.line("x", "y", source=self.coast, line_color="#ffffff", line_width=2.2, line_alpha=0.55)
            fig.line("x", "y", source=self.coast, line_color="#1f2933", line_width=0.8, line_alpha=0.9)
            fig.quad(left="left", right="right", bottom="bottom", top="top", source=self.outline, fill_alpha=0.0,
                     line_color="#111111", line_width=1.5, line_dash="dashed")
            dots = None
            if stippled:
                dots = ColumnDataSource({"x": [], "y": []})
                fig.scatter("x", "y", source=dots, size=3, fill_color="#111111", line_color="#ffffff", line_width=0.4)
            # Tooltip labels are set as text by Bokeh; only the value templates are HTML,
            # and they hold our own words and placeholders, whose values Bokeh escapes.
            hover = HoverTool(renderers=[shown], tooltips=[("Longitude", "$x{0.00} °E"), ("Latitude", "$y{0.00} °N"), ("", value)],
                              formatters=formatters)
            pan, wheel = PanTool(), WheelZoomTool()
            fig.add_tools(pan, wheel, BoxZoomTool(), BoxSelectTool(renderers=[shown]), ResetTool(), SaveTool(), hover)
            fig.toolbar.active_drag, fig.toolbar.active_scroll = pan, wheel
            fig.on_event(SelectionGeometry, set_box)
            for renderer in fig.renderers:  # nothing on a map is drawn selected or muted: no glyph models for those looks
                renderer.nonselection_glyph = None
                renderer.muted_glyph = None
            bar = ColorBar(color_mapper=self.mapper, width=12)
            fig.add_layout(bar, "right")
            self.figures.append(fig)
            self.sources.append(source)
            self.dots.append(dots)
            self.hovers.append(hover)
            self.bars.append(bar)
        self.grid = gridplot(self.figures, ncols=2 if len(self.figures) > 1 else 1, sizing_mode="stretch_width", toolbar_location="right",
                             merge_tools=True)
        self.grid.toolbar.logo = None
        self.downloads: list[pn.widgets.FileDownload] = []
        self.column: pn.Column | None = None

    def update(self, fields: list[xr.DataArray], items: list[MapField], masks: list[xr.DataArray | None],
               clim: tuple[float, float], region: str) -> None:
        """New numbers, range, titles and outline into the existing models."""
        self.mapper.update(low=clim[0], high=clim[1])
        boxes = region_boxes(region)
        self.outline.data = {"left": [b[0] for b in boxes], "right": [b[2] for b in boxes],
                             "bottom": [b[1] for b in boxes], "top": [b[3] for b in boxes]}
        columns = [image_columns(field) if self.shape[i][2] else quad_columns(field) for i, field in enumerate(fields)]
        extent = map_extent(columns)
        if extent != self.extent:  # only a new box moves the view (a reader's zoom is kept otherwise)
            self.extent = extent
            x_range, y_range = self.ranges
            x_range.update(start=extent[0], end=extent[1], reset_start=extent[0], reset_end=extent[1])
            y_range.update(start=extent[2], end=extent[3], reset_start=extent[2], reset_end=extent[3])
            self.tickers[0].ticks, self.tickers[1].ticks = _ticks(extent[0], extent[1]), _ticks(extent[2], extent[3])
        for i, (_field, item, mask) in enumerate(zip(fields, items, masks, strict=True)):
            self.sources[i].data = columns[i]
            dots = self.dots[i]
            if dots is not None and mask is not None:
                dots.data = dot_columns(mask)
            units = str(item.data.attrs.get("units", ""))
            _set(self.figures[i].title, "text", canvas_text(item.title))
            _set(self.bars[i], "title", canvas_text(units) if units else None)
            label = f"{item.quantity} ({units})" if units else item.quantity
            tooltips = self.hovers[i].tooltips
            if tooltips[-1][0] != label:
                self.hovers[i].tooltips = [*tooltips[:-1], (label, tooltips[-1][1])]


def _set(model: Any, name: str, value: Any) -> None:
    """Set a property only when it changes (a change is a message to the page)."""
    old = getattr(model, name)
    same = old == value if not isinstance(old, PlainText) else isinstance(value, PlainText) and old.text == value.text
    if not same:
        setattr(model, name, value)


class MapsView(ResultView):
    """Maps of the selected field: reference and runs, or their differences."""

    tab = "maps"
    title = "Maps"
    uses = ("variable", "reference", "region", "season", "period")
    explanation = (
        "Climatological fields over the selected period and season, on the reference's grid. "
        "Means use one shared colour scale; differences and trends are centred on zero "
        "(blue: below the reference or decreasing, red: above or increasing). "
        "Hover for values; the dashed outline is the selected region; drag with the box-select tool "
        "to use a box as the region. On run-minus-reference, trend and trend-difference maps, dots mark cells that stand out from "
        "interannual variability (rule below the maps)."
    )

    def _layout_of(self, request: Request) -> list[tuple[str, str, bool]]:
        """``(kind, source, signed)`` for each map of the request's field."""
        ref, runs = request.reference, list(request.models)
        return {
            "model_mean": [("climatology", ref, False)] + [("climatology", m, False) for m in runs],
            "reference_mean": [("climatology", ref, False)],
            "difference": [("difference", m, True) for m in runs],
            "model_trend": [("trend_map", ref, True)] + [("trend_map", m, True) for m in runs],
            "trend_difference": [("trend_difference", m, True) for m in runs],
        }[request.field]

    def key(self, request: Request) -> Any:
        return (request.variable, request.level, request.reference, request.models, request.region, request.season, request.period, request.field)

    def _products(self, request: Request) -> list[tuple[str, str, bool, tuple, tuple | None]]:
        """Per map: kind, source, signed, the arguments of its field and of its stippling (or None)."""
        out = []
        for kind, source, signed in self._layout_of(request):
            common = (request.reference, request.variable, request.period, request.season)
            tail = (source, request.level, request.target_grid)
            mask = common + (f"{kind}_significance",) + tail if kind in _STIPPLED else None
            out.append((kind, source, signed, common + (kind,) + tail, mask))
        return out

    def _data(self, request: Request, fields: list[xr.DataArray], masks: list[xr.DataArray | None]) -> dict[str, Any]:
        items = [
            MapField(source=source, title=_title(kind, source, request.reference), data=data, signed=signed, quantity=_QUANTITY[kind])
            for (kind, source, signed, _, _), data in zip(self._products(request), fields, strict=True)
        ]
        return {"items": items, "masks": masks}

    async def load(self, request: Request) -> dict[str, Any]:
        results = self.results
        products = self._products(request)
        fields = [await results.fetch(("map",) + args, results.map_field, *args) for _, _, _, args, _ in products]
        masks = [None if args is None else await results.fetch(("map",) + args, results.map_field, *args) for *_, args in products]
        return self._data(request, fields, masks)

    def ready(self, request: Request) -> dict[str, Any] | None:
        """The maps' numbers when every one is already computed (none is computed here)."""
        cache = self.results.products
        found = {}
        for *_, args, mask in self._products(request):
            for a in (args, mask):
                if a is not None:
                    value = cache.get(("map",) + a, None)
                    if value is None:
                        return None
                    found[a] = value
        products = self._products(request)
        return self._data(request, [found[p[3]] for p in products], [None if p[4] is None else found[p[4]] for p in products])

    def has_figure(self, data: dict[str, Any], request: Request) -> bool:
        items: list[MapField] = data["items"]
        return bool(items) and colour_range([i.data for i in items], signed=items[0].signed) is not None

    def figure(self, data: dict[str, Any], request: Request) -> hv.Layout | None:
        """The maps as HoloViews elements, for the PNG/SVG export only (the page draws :class:`MapFigures`)."""
        items: list[MapField] = data["items"]
        if not items:
            return None
        clim = colour_range([i.data for i in items], signed=items[0].signed)
        if clim is None:
            return None
        outline = region_outline(request.region)
        masks = data.get("masks") or [None] * len(items)
        maps = [
            map_element(i, clim=clim, units=str(i.data.attrs.get("units", ""))) * outline * (stipple_element(f) if f is not None else hv.Overlay([]))
            for i, f in zip(items, masks, strict=True)
        ]
        info = self.results.variable_info(request.variable)
        name = f"{info.long_name} ({request.variable})" if info.long_name else request.variable
        title = f"{name}, {request.season} {request.period}" + (f" ({STIPPLE_LEGEND})" if any(f is not None for f in masks) else "")
        layout = hv.Layout(maps).cols(2 if len(maps) > 1 else 1)
        return layout.opts(shared_axes=True, backend="bokeh").opts(title=plot_title(title), sublabel_format="", backend="matplotlib")

    def draw(self, data: dict[str, Any], request: Request) -> pn.viewable.Viewable:
        items: list[MapField] = data["items"]
        masks = data.get("masks") or [None] * len(items)
        clim = colour_range([i.data for i in items], signed=items[0].signed) if items else None
        if clim is None:
            self._maps = None
            return pn.pane.HTML('<div class="gs-empty">No valid values in this field for the selected period and season.</div>')
        fields = [display_grid(i.data) for i in items]
        shape = tuple((i.signed, m is not None, _regular(f["lon"].values) and _regular(f["lat"].values))
                      for i, m, f in zip(items, masks, fields, strict=True))
        maps: MapFigures | None = getattr(self, "_maps", None)
        if maps is None or maps.shape != shape:  # another number or kind of maps: new models
            maps = MapFigures(shape, self.selection)
            maps.downloads = [self._field_download(item, request, mask) for item, mask in zip(items, masks, strict=True)]
            legend = []
            if any(m is not None for m in masks):
                legend.append(pn.pane.HTML(f'<div class="gs-hint gs-stipple-legend">{STIPPLE_LEGEND[0].upper() + STIPPLE_LEGEND[1:]}: {STIPPLE_RULE}</div>', margin=(0, 10, 4, 10)))
            maps.column = pn.Column(
                pn.pane.Bokeh(maps.grid, sizing_mode="stretch_width"),
                *legend,
                pn.Row(pn.pane.HTML('<span class="gs-hint">Fields as CF NetCDF:</span>', margin=(12, 4)), *maps.downloads),
                sizing_mode="stretch_width",
            )
            self._maps = maps
        else:
            for button, item, mask in zip(maps.downloads, items, masks, strict=True):
                settings = self._download_settings(item, request, mask)
                if button.data is not None:
                    settings["data"] = None  # the file sent before is of other numbers
                button.param.update(**settings)
        maps.update(fields, items, masks, clim, request.region)
        return maps.column

    # ------------------------------------------------------------------ NetCDF downloads
    def _download_settings(self, item: MapField, request: Request, mask: xr.DataArray | None = None) -> dict[str, Any]:
        """What a map's download button says and sends (set again when the maps are updated in place)."""
        results = self.results
        args = (request.reference, request.variable, request.period, request.region, request.season, request.level, request.target_grid)

        async def make() -> io.BytesIO:
            record = await results.fetch(("provenance",) + args, results.provenance, *args)
            # the files of this map's sources only (the run's and the reference's), not every run of the comparison
            mine = provenance_for(record, {request.reference, item.source})
            payload = await results.run(lambda: field_bytes(with_mask(item.data, mask, request.variable), provenance=mine))
            return io.BytesIO(payload)

        return {
            "callback": make,
            "filename": safe_filename(request.variable, item.title.replace(" ", "-"), request.season, request.period) + ".nc",
            "label": item.title,
            "width": min(320, 60 + 8 * len(item.title)),
            # the title holds run and reference names (folder names, manifest): text only
            "description": text_tooltip(f"Download '{item.title}' as CF NetCDF with provenance"),
        }

    def _field_download(self, item: MapField, request: Request, mask: xr.DataArray | None = None) -> pn.widgets.FileDownload:
        return pn.widgets.FileDownload(
            **self._download_settings(item, request, mask), color="light", height=34, css_classes=["gs-download-nc"],
        )
