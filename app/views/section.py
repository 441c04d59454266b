"""Zonal-mean sections: latitude × level of the reference, each run and their difference.

The core computes the sections and their scores (``Comparison.zonal_section``); this view
only draws them.  Pressure is drawn on a log-pressure axis: the height of each row is
H·ln(1000 hPa / p), so equal distances are equal ratios of pressure, with ticks labelled
in hPa; heights go up, depths go down.
"""

from __future__ import annotations

from dataclasses import replace
from typing import Any

import holoviews as hv
import numpy as np
import panel as pn
import xarray as xr

from ..state import Request
from .base import ResultView, figure_pane, plot_title, text_html
from .look import DIVERGING, SEQUENTIAL
from .maps import colour_range

__all__ = ["SectionView", "levels_description", "section_element", "vertical_axis"]

#: Height of a pressure row on the drawing, H ln(1000 hPa / p), in km (H = 7 km, the
#: usual log-pressure scale height; only the spacing of the rows depends on it).
_SCALE_HEIGHT_KM = 7.0


def _to_hpa(values: np.ndarray, units: str) -> np.ndarray:
    from evaluation.units import conversion

    a, b = conversion(units, "hPa")
    return a * np.asarray(values, dtype="float64") + b


def vertical_axis(level: xr.DataArray) -> tuple[np.ndarray, hv.Dimension, list[tuple[float, str]]]:
    """Drawing positions of the levels, the axis dimension and its ticks.

    Pressure: log-pressure height with ticks in hPa; height: metres up; depth: metres
    drawn downward (negative), ticks showing the depth.
    """
    kind = str(level.attrs.get("level_kind", ""))
    units = str(level.attrs.get("units", ""))
    values = np.asarray(level.values, dtype="float64")
    if kind == "pressure":
        hpa = _to_hpa(values, units)
        y = _SCALE_HEIGHT_KM * np.log(1000.0 / hpa)
        ticks = [(float(v), f"{p:g}") for v, p in zip(y, hpa, strict=True)]
        return y, hv.Dimension("y", label="Pressure (log scale)", unit="hPa"), ticks
    if kind == "depth":
        return -values, hv.Dimension("y", label="Depth", unit=units), [(float(-v), f"{v:g}") for v in values]
    return values, hv.Dimension("y", label="Height", unit=units), [(float(v), f"{v:g}") for v in values]


#: Rows of the drawing: each level fills the band half-way to its neighbours.
_DISPLAY_ROWS = 240


def _even_rows(y: np.ndarray, data: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """The section on evenly spaced rows (each level repeated over its band), for hv.Image.

    Levels are unevenly spaced; a QuadMesh of them shows seams between the cells in the
    browser, an Image of evenly spaced rows does not.  Only for drawing: no value is
    interpolated, each row shows the level whose band it falls in.
    """
    order = np.argsort(y)
    y, data = y[order], data[order]
    mids = 0.5 * (y[1:] + y[:-1])
    half = (y[-1] - y[0]) / max(2 * (y.size - 1), 1) if y.size > 1 else 0.5
    edges = np.concatenate([[y[0] - half], mids, [y[-1] + half]])
    step = (edges[-1] - edges[0]) / _DISPLAY_ROWS
    rows = edges[0] + step * (np.arange(_DISPLAY_ROWS) + 0.5)
    band = np.clip(np.searchsorted(edges, rows, side="right") - 1, 0, y.size - 1)
    return rows, data[band]


def section_element(field: xr.DataArray, *, title: str, quantity: str, clim: tuple[float, float], signed: bool, units: str) -> hv.Image:
    """One section as an image: latitude across, the vertical axis up."""
    y, ydim, ticks = vertical_axis(field["level"])
    rows, data = _even_rows(y, np.asarray(field.transpose("level", "lat").values, dtype="float64"))
    xdim = hv.Dimension("lat", label="Latitude", unit="°N")
    vdim = hv.Dimension("value", label=quantity, unit=units)
    lat = np.asarray(field["lat"].values, dtype="float64")
    steps = np.diff(lat)
    even = steps.size == 0 or bool(np.allclose(steps, steps[0], rtol=1e-3))
    # uneven (e.g. Gaussian) latitudes would be misplaced by hv.Image (holoviz/holoviews#1869)
    mesh = (hv.Image if even else hv.QuadMesh)((lat, rows, data), kdims=[xdim, ydim], vdims=[vdim])
    palette = DIVERGING if signed else SEQUENTIAL
    # run names come from the manifest: braces kept literal in HoloViews titles
    common = dict(cmap=palette, clim=clim, colorbar=True, title=plot_title(title), yticks=ticks, xticks=[-90, -60, -30, 0, 30, 60, 90])
    return mesh.opts(
        **common, tools=["hover"], responsive=True, height=320, clipping_colors={"NaN": "transparent"},
        colorbar_opts={"title": units}, backend="bokeh",
    ).opts(**common, clipping_colors={"NaN": (1.0, 1.0, 1.0, 0.0)}, fig_inches=(6, 3.4), backend="matplotlib")


def levels_description(level: xr.DataArray) -> str:
    """What a section's vertical axis holds: ``"4 levels, 1000 to 250 hPa (1000, 850, 500, 250 hPa)"``.

    The levels in the order of the coordinate (bottom first for pressure and depth as the
    reference stores them), in its units; the list is left out beyond 12 levels.
    """
    units = str(level.attrs.get("units", ""))
    values = [float(v) for v in np.asarray(level.values, dtype="float64").ravel() if np.isfinite(v)]
    if not values:
        return "no levels"
    unit = f" {units}" if units else ""
    if len(values) == 1:
        return f"1 level, {values[0]:g}{unit}"
    text = f"{len(values)} levels, {values[0]:g} to {values[-1]:g}{unit}"
    if len(values) <= 12:
        text += f" ({', '.join(f'{v:g}' for v in values)}{unit})"
    return text


_CELL = ' style="padding:3px 14px 3px 0;text-align:left;border-bottom:1px solid #ddd"'
_NUMBER = ' style="padding:3px 14px 3px 0;text-align:right;border-bottom:1px solid #ddd;font-variant-numeric:tabular-nums"'


class SectionView(ResultView):
    """Latitude × level sections of the climatology: reference, runs, run minus reference."""

    tab = "section"
    title = "Vertical section"
    uses = ("variable", "reference", "season", "period")
    explanation = (
        "Zonal-mean climatology on every level of the reference, with each run brought onto the "
        "reference's levels (linear in log-pressure; levels outside a run's range and below the "
        "surface stay blank). The section score is the bias and RMSE of the run's section against "
        "the reference's, weighted by layer thickness Δp (half-way to the neighbouring levels: a "
        "mass weighting, common practice for pressure-level diagnostics) times the area of each "
        "latitude band (∝ Δ sin φ): bias = Σw(m−r)/Σw, RMSE = √(Σw(m−r)²/Σw)."
    )

    def key(self, request: Request) -> Any:
        return (request.variable, request.level, request.reference, request.models, request.season, request.period)

    def context(self, request: Request) -> str:
        """The "Showing" line: every level drawn, not the single level the other views use."""
        line = super().context(replace(request, level=""))
        if not request.level:
            return line
        shown = getattr(self, "_levels_shown", None)
        levels = shown[1] if shown is not None and shown[0] == request else "every level of the reference"
        variable, _, rest = line.partition(" · ")
        return " · ".join(p for p in (f"{variable}, zonal mean on {levels}", rest) if p)

    async def load(self, request: Request) -> dict[str, Any]:
        results = self.results
        sections: dict[str, Any] = {}
        if not request.level:
            return sections  # a variable without levels: nothing to draw (see draw)
        for name in (request.reference, *request.models):
            if name != request.reference and name not in results.models(request.variable):
                continue
            args = (request.reference, request.variable, request.period, request.season, name, request.level, request.target_grid)
            sections[name] = await results.fetch(("section",) + args, results.zonal_section, *args)
        return sections

    def figure(self, data: dict[str, xr.Dataset], request: Request) -> hv.Layout | None:
        ref = data.get(request.reference)
        if ref is None:
            return None
        units = str(ref["reference"].attrs.get("units", ""))
        runs = [name for name in data if name != request.reference]
        means = [ref["reference"], *(data[n]["run"] for n in runs)]
        diffs = [data[n]["difference"] for n in runs]
        mean_range = colour_range(means, signed=False)
        diff_range = colour_range(diffs, signed=True) if diffs else None
        if mean_range is None:
            return None
        panels = [section_element(ref["reference"], title=request.reference, quantity="Mean", clim=mean_range, signed=False, units=units)]
        for name in runs:
            section = data[name]
            panels.append(section_element(section["run"], title=name, quantity="Mean", clim=mean_range, signed=False, units=units))
            if diff_range is not None:
                panels.append(section_element(section["difference"], title=f"{name} − {request.reference}", quantity="Difference",
                                              clim=diff_range, signed=True, units=units))
        return hv.Layout(panels).cols(3 if runs else 1).opts(shared_axes=False, backend="bokeh").opts(sublabel_format="", backend="matplotlib")

    def draw(self, data: dict[str, xr.Dataset], request: Request) -> pn.viewable.Viewable:
        if not request.level:
            levelled = [v for v in self.results.variables() if self.results.levels(v)]
            text = f"{request.variable} has no vertical levels. Choose a variable on levels ({', '.join(levelled)}) to see its section."
            return pn.pane.HTML(f'<div class="gs-empty">{text_html(text)}</div>')
        figure = self.figure(data, request)
        if figure is None:
            return pn.pane.HTML('<div class="gs-empty">No valid values in this section for the selected period and season.</div>')
        # the drawn levels (the reference's), said in the "Showing" line (see context)
        self._levels_shown = (request, levels_description(data[request.reference]["reference"]["level"]))
        runs = [name for name in data if name != request.reference]
        units = str(data[request.reference]["reference"].attrs.get("units", ""))
        rows = "".join(
            f"<tr><td{_CELL}>{text_html(n)}</td><td{_NUMBER}>{data[n].attrs['bias']:+.4g}</td>"
            f"<td{_NUMBER}>{data[n].attrs['rmse']:.4g}</td></tr>"
            for n in runs
        )
        table = (
            f'<table class="gs-section-scores" style="border-collapse:collapse;font-size:13px"><tr><th{_CELL}>Run</th>'
            f"<th{_CELL}>Section bias ({text_html(units)})</th><th{_CELL}>Section RMSE ({text_html(units)})</th></tr>{rows}</table>"
            if runs else '<div class="gs-hint">No selected run holds this variable on levels.</div>'
        )
        return pn.Column(figure_pane(figure), pn.pane.HTML(table, margin=(4, 10)), sizing_mode="stretch_width")
