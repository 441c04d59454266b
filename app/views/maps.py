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
from typing import Any

import holoviews as hv
import numpy as np
import panel as pn
import xarray as xr

from evaluation.export import field_bytes, provenance_for
from evaluation.regions import parse_region
from evaluation.significance import FDR_LEVEL

from ..state import Request
from .base import ResultView, figure_pane, plot_title, safe_filename, text_tooltip
from .coastlines import coastline_path
from .look import DIVERGING, SEQUENTIAL
from .results import MapField

__all__ = ["MapsView", "colour_range", "display_grid", "map_element", "region_outline", "stipple_points", "STIPPLE_LEGEND"]

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


def region_outline(region: str) -> hv.Overlay:
    """Dashed rectangles around the selected region (none for global, land or ocean).

    A box whose west edge lies east of its east edge crosses the date line and is drawn as
    two rectangles; longitudes are brought into [-180, 180) like the maps'.
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
    layers = [
        hv.Bounds(b).opts(color="#111111", line_width=1.5, line_dash="dashed", backend="bokeh").opts(
            color="#111111", linewidth=1.0, linestyle="--", backend="matplotlib")
        for b in boxes
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

    async def load(self, request: Request) -> dict[str, Any]:
        results = self.results
        items = []
        for kind, source, signed in self._layout_of(request):
            args = (request.reference, request.variable, request.period, request.season, kind, source, request.level, request.target_grid)
            data = await results.fetch(("map",) + args, results.map_field, *args)
            items.append(MapField(source=source, title=_title(kind, source, request.reference), data=data, signed=signed, quantity=_QUANTITY[kind]))
        masks = []
        for kind, source, _ in self._layout_of(request):
            if kind not in _STIPPLED:
                masks.append(None)
                continue
            args = (request.reference, request.variable, request.period, request.season, f"{kind}_significance", source, request.level, request.target_grid)
            masks.append(await results.fetch(("map",) + args, results.map_field, *args))
        return {"items": items, "masks": masks}

    def figure(self, data: dict[str, Any], request: Request) -> hv.Layout | None:
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
        figure = self.figure(data, request)
        if figure is None:
            return pn.pane.HTML('<div class="gs-empty">No valid values in this field for the selected period and season.</div>')
        plot = figure_pane(figure)  # the maps share their axes inside the layout
        self._watch_box(plot)
        masks = data.get("masks") or [None] * len(data["items"])
        downloads = [self._field_download(item, request, mask) for item, mask in zip(data["items"], masks, strict=True)]
        legend = []
        if any(m is not None for m in masks):
            legend.append(pn.pane.HTML(f'<div class="gs-hint gs-stipple-legend">{STIPPLE_LEGEND[0].upper() + STIPPLE_LEGEND[1:]}: {STIPPLE_RULE}</div>', margin=(0, 10, 4, 10)))
        return pn.Column(
            plot,
            *legend,
            pn.Row(pn.pane.HTML('<span class="gs-hint">Fields as CF NetCDF:</span>', margin=(12, 4)), *downloads),
            sizing_mode="stretch_width",
        )

    # ------------------------------------------------------------------ box region
    def _watch_box(self, plot: pn.pane.HoloViews) -> None:
        # One stream per drawing, tied to the first map; it goes away with the drawing.
        # A plain function, not a bound method of this view, so that the stream's
        # subscriber list does not keep the view alive (holoviz/panel#4116).
        selection = self.selection
        overlay = plot.object
        first = next(iter(overlay)) if isinstance(overlay, hv.Layout) else overlay
        image = first.get(0) if isinstance(first, hv.Overlay) else first

        def set_box(bounds: tuple[float, float, float, float] | None = None) -> None:
            if bounds is None:
                return
            west, south, east, north = (float(v) for v in bounds)
            south, north = max(-90.0, min(south, north)), min(90.0, max(south, north))
            west, east = max(-180.0, west), min(180.0, east)
            if north - south < 1 or east - west < 1:
                return
            selection.region = f"box:{south:.0f},{north:.0f},{west:.0f},{east:.0f}"

        hv.streams.BoundsXY(source=image, subscribers=[set_box])

    # ------------------------------------------------------------------ NetCDF downloads
    def _field_download(self, item: MapField, request: Request, mask: xr.DataArray | None = None) -> pn.widgets.FileDownload:
        results = self.results
        args = (request.reference, request.variable, request.period, request.region, request.season, request.level, request.target_grid)

        async def make() -> io.BytesIO:
            record = await results.fetch(("provenance",) + args, results.provenance, *args)
            # the files of this map's sources only (the run's and the reference's), not every run of the comparison
            mine = provenance_for(record, {request.reference, item.source})
            payload = await results.run(lambda: field_bytes(with_mask(item.data, mask, request.variable), provenance=mine))
            return io.BytesIO(payload)

        filename = safe_filename(request.variable, item.title.replace(" ", "-"), request.season, request.period) + ".nc"
        return pn.widgets.FileDownload(
            callback=make,
            filename=filename,
            label=item.title,
            color="light",
            width=min(320, 60 + 8 * len(item.title)),
            height=34,
            # the title holds run and reference names (folder names, manifest): text only
            description=text_tooltip(f"Download '{item.title}' as CF NetCDF with provenance"),
            css_classes=["gs-download-nc"],
        )

