"""Overview: a heat map of normalised relative errors, runs × variables (Gleckler et al. 2008).

Each cell is ``(E − median E) / median E`` for one run and one variable, where ``E`` is
the run's RMSE against the reference and the median is taken over all runs of the
collection that hold the variable: negative (blue) is better than the typical run,
positive (red) worse.  Values come from the core's ``rel_error`` score; the heat map is
computed for the whole collection, not only the runs ticked in the sidebar.
"""

from __future__ import annotations

from typing import Any

import holoviews as hv
import numpy as np
import pandas as pd
import panel as pn
import param

from evaluation.regions import REGIONS, parse_region

from ..state import Request
from .base import ResultView, figure_pane, plot_title
from .look import DIVERGING

__all__ = ["OverviewView", "SPLITS", "error_matrix"]

#: What the columns show besides the variable: view option -> label.
SPLITS = {"none": "Variables", "season": "Variables × seasons", "region": "Variables × regions"}
_SEASONS = ("ANN", "DJF", "MAM", "JJA", "SON")


def error_matrix(tidy: pd.DataFrame, *, split: str) -> pd.DataFrame:
    """Relative errors as a long frame: ``model``, ``column`` (variable [× split]), ``value``.

    Notes
    -----
    Rows other than the ``rel_error`` metric are ignored; NaN stays NaN (an empty cell).
    """
    rel = tidy[tidy["metric"] == "rel_error"].copy()
    if "level" in rel.columns:  # a variable on levels is shown on its level: "ta 500 hPa"
        rel["variable"] = [f"{v} {lv}" if isinstance(lv, str) and lv else v for v, lv in zip(rel["variable"], rel["level"], strict=True)]
    if split == "season":
        rel["column"] = rel["variable"] + " " + rel["season"]
    elif split == "region":
        rel["column"] = rel["variable"] + " " + rel["region"]
    else:
        rel["column"] = rel["variable"]
    return rel[["model", "column", "variable", "region", "season", "reference", "value"]].reset_index(drop=True)


def _tied_cells(ties: pd.DataFrame | None, split: str) -> set[tuple[str, str]]:
    """(run, column) of the cells within observational uncertainty of their column's best."""
    if ties is None or ties.empty:
        return set()
    return set(zip(ties["model"], error_matrix(ties.assign(metric="rel_error", reference="", value=0.0), split=split)["column"], strict=True))


def _cell_text(value: float) -> str:
    if not np.isfinite(value):
        return ""
    return "0.00" if abs(value) < 0.005 else f"{value:+.2f}"  # no "-0.00"


class OverviewView(ResultView):
    """Every run against every variable at a glance."""

    tab = "overview"
    title = "Overview of relative errors"
    uses = ("reference", "region", "season", "period")
    explanation = (
        "Each cell compares one run's RMSE for one variable with the median RMSE of all runs "
        "(Gleckler et al. 2008): −0.2 means 20 % smaller error than the typical run (blue, "
        "better), +0.2 means 20 % larger (red, worse). Computed for every run and variable of "
        "the collection, for the selected region, season and period; grey: the run does not "
        "provide the variable. ≈ marks a run within observational uncertainty of the best run of "
        "its column (for variables with several references; the rule is on the Scores page)."
    )

    split = param.Selector(default="none", objects=list(SPLITS))

    def controls(self) -> list[pn.viewable.Viewable]:
        choice = pn.widgets.RadioButtonGroup(
            label="Columns", options={label: key for key, label in SPLITS.items()}, value=self.split, color="light", margin=(4, 10)
        )
        choice.link(self, value="split")
        self.param.watch(lambda event: self.update(force=True), "split")
        return [choice]

    def key(self, request: Request) -> Any:
        return (request.reference, request.region, request.season, request.period, self.split)

    async def load(self, request: Request) -> dict[str, Any]:
        regions = tuple(REGIONS) if self.split == "region" else (request.region,)
        seasons = _SEASONS if self.split == "season" else (request.season,)
        args = (request.reference, request.period, regions, seasons, request.target_grid)
        results = self.results
        tidy = await results.fetch(("overview",) + args, results.overview, *args)
        ties = await results.fetch(("overview_ties",) + args, results.overview_ties, *args)
        return {"tidy": tidy, "split": self.split, "ties": ties}

    def figure(self, data: dict[str, Any], request: Request) -> hv.Overlay | None:
        matrix = error_matrix(data["tidy"], split=data["split"])
        if matrix.empty:
            return None
        runs = list(dict.fromkeys(matrix["model"]))
        columns = list(dict.fromkeys(matrix["column"]))
        finite = matrix["value"].to_numpy(dtype="float64")
        finite = finite[np.isfinite(finite)]
        top = float(np.abs(finite).max()) if finite.size else 1.0
        top = top if top > 0 else 1.0  # all runs equal: a zero range breaks the colour bar
        # "≈": within observational uncertainty of the best run of the column (several references)
        tied = _tied_cells(data.get("ties"), data["split"])
        marks = ["≈" if (m, c) in tied else "" for m, c in zip(matrix["model"], matrix["column"], strict=True)]
        frame = matrix.assign(text=[mark + _cell_text(v) for mark, v in zip(marks, matrix["value"], strict=True)])
        # HoloViews reshapes the hover columns into the grid; pyarrow-backed strings
        # (pandas' default string type) cannot be reshaped, plain objects can.
        frame = frame.astype({c: object for c in frame.columns if c != "value"})
        xdim = hv.Dimension("column", label="Variable", values=columns)
        ydim = hv.Dimension("model", label="Run", values=runs[::-1])
        vdim = hv.Dimension("value", label="Relative error")
        heat = hv.HeatMap(frame, [xdim, ydim], [vdim, "reference", "region", "season"])
        # Dark cells need light text: two label layers, split at 60 % of the colour range.
        dark = np.abs(frame["value"].to_numpy(dtype="float64")) > 0.6 * top
        labels = [hv.Labels(frame[dark], [xdim, ydim], "text"), hv.Labels(frame[~dark], [xdim, ydim], "text")]
        where = parse_region(request.region).label if data["split"] != "region" else "all regions"
        when = request.season if data["split"] != "season" else "seasons"
        title = plot_title(f"Relative RMSE error: {where}, {when}, {request.period}")
        height = max(260, 60 + 44 * len(runs))
        heat = heat.opts(
            cmap=DIVERGING, clim=(-top, top), colorbar=True, tools=["hover"], xrotation=30 if len(columns) > 6 else 0,
            responsive=True, height=height, title=title, clipping_colors={"NaN": "#eeeeee"}, toolbar="above",
            colorbar_opts={"title": "rel. error"}, backend="bokeh",
        ).opts(cmap=DIVERGING, clim=(-top, top), colorbar=True, title=title, fig_inches=(max(6, 1.1 * len(columns) + 3), max(3, 0.5 * len(runs) + 1.5)),
               xrotation=30 if len(columns) > 6 else 0, backend="matplotlib")
        labels = [
            layer.opts(text_font_size="10pt", text_color=colour, backend="bokeh").opts(size=9, color=colour, backend="matplotlib")
            for layer, colour in zip(labels, ("#ffffff", "#111827"), strict=True)
        ]
        return heat * labels[0] * labels[1]

    def export_figure(self, data: dict[str, Any], request: Request) -> hv.Element | None:
        # matplotlib cannot place text labels on categorical heat-map axes; it writes the
        # values into the cells itself.
        figure = self.figure(data, request)
        if figure is None:
            return None
        heat = figure.get(0)
        runs, columns = len(heat.dimension_values(1, expanded=False)), len(heat.dimension_values(0, expanded=False))
        rounded = heat.clone(heat.data.assign(value=heat.data["value"].round(2)))
        return rounded.opts(
            show_values=True, aspect=max(1.0, columns / max(runs, 1)) * 1.2, fig_inches=max(7.0, 1.1 * columns + 3.0),
            backend="matplotlib",
        )

    def figure_name(self, request: Request) -> str:
        return super().figure_name(request).replace(f"_{request.variable}_", "_")

    def draw(self, data: dict[str, Any], request: Request) -> pn.viewable.Viewable:
        figure = self.figure(data, request)
        if figure is None:
            return pn.pane.HTML('<div class="gs-empty">No relative errors for this selection.</div>')
        return figure_pane(figure)
