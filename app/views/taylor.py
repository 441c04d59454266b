"""Taylor (2001) diagram of the selected runs against the reference.

Radius is the spatial standard deviation (optionally divided by the reference's), the
angle from the horizontal axis is ``arccos(correlation)``, and the distance from the
reference point is the centred RMS difference, drawn as arcs around that point; the law
of cosines ``E'² = σ_m² + σ_r² − 2 σ_m σ_r R`` (Taylor 2001, eq. 2) makes the three agree.
The numbers are the core's scores (``std_ratio``, ``corr``, ``crmse``).
"""

from __future__ import annotations

import math
from typing import Any

import holoviews as hv
import numpy as np
import pandas as pd
import panel as pn
from evaluation.ensembles import MEAN_SUFFIX
from evaluation.regions import region_label

from ..state import TAYLOR_SCALES, Request
from .base import ResultView, figure_pane, on_document, plot_title
from .look import REFERENCE_COLOUR
from .series import ensemble_members, members_of_ensemble

__all__ = ["TaylorView", "taylor_points"]

_CORRELATION_TICKS = (0.0, 0.2, 0.4, 0.6, 0.8, 0.9, 0.95, 0.99)
_GRID = "#c9c4b8"
_RMS = "#3f8f5f"


def taylor_points(tidy: pd.DataFrame, *, normalised: bool) -> tuple[pd.DataFrame, float]:
    """Polar and Cartesian positions of each run, and the reference's radius.

    Parameters
    ----------
    tidy
        Tidy scores of one reference, variable, region, season and period.
    normalised
        Divide standard deviations by the reference's (the reference sits at radius 1).

    Returns
    -------
    (DataFrame, float)
        Columns ``model corr std crmse x y`` (``std`` and ``crmse`` in data units, or
        normalised), and the reference's standard deviation on the same scale.

    Notes
    -----
    The reference's standard deviation is not a column of the tidy table; it follows from
    the law of cosines, ``σ_r = E' / sqrt(1 + s² − 2 s R)`` with ``s`` the std ratio
    (Taylor 2001, eq. 2), using the run for which that denominator is largest (the
    best-conditioned).  Runs with NaN correlation or ratio are dropped.  Correlations are
    clipped to [-1, 1] before ``arccos``.
    """
    wide = tidy.pivot_table(index="model", columns="metric", values="value", sort=False)
    wide = wide.reindex(index=list(dict.fromkeys(tidy["model"])))
    wide = wide[["corr", "std_ratio", "crmse"]].dropna(subset=["corr", "std_ratio"])
    corr = wide["corr"].clip(-1.0, 1.0).to_numpy()
    ratio = wide["std_ratio"].to_numpy()
    if normalised:
        ref_std = 1.0
    else:
        denominator = np.sqrt(np.maximum(1.0 + ratio**2 - 2.0 * ratio * corr, 0.0))
        usable = np.isfinite(wide["crmse"].to_numpy()) & (denominator > 1e-9)
        if not usable.any():
            ref_std = float("nan")
        else:
            i = int(np.argmax(np.where(usable, denominator, -1.0)))
            ref_std = float(wide["crmse"].to_numpy()[i] / denominator[i])
    std = ratio * ref_std
    theta = np.arccos(corr)
    crmse = np.sqrt(np.maximum(std**2 + ref_std**2 - 2.0 * std * ref_std * corr, 0.0))
    frame = pd.DataFrame(
        {"model": wide.index.astype(str), "corr": corr, "std": std, "crmse": crmse, "x": std * np.cos(theta), "y": std * np.sin(theta)}
    )
    return frame, ref_std


def _nice_step(top: float) -> float:
    raw = top / 4.0
    power = 10 ** math.floor(math.log10(raw))
    return next(s * power for s in (1, 2, 2.5, 5, 10) if s * power >= raw)


class TaylorView(ResultView):
    """Where each run lies in correlation, spatial variability and centred RMS error."""

    tab = "taylor"
    title = "Taylor diagram"
    explanation = (
        "Distance from the origin: spatial standard deviation of the climatology; angle: pattern "
        "correlation with the reference (labels on the outer arc); green arcs: centred RMS "
        "difference from the reference point (black). The closer a run is to the reference "
        "point, the better its pattern. Black diamonds are the other references, placed as if they "
        "were runs: runs nearer the reference point than they are differ from it by no more than "
        "the observations do. An ensemble's mean is one point; its members are the small points around it."
    )

    def controls(self) -> list[pn.viewable.Viewable]:
        # the scale is part of the link (URL ``taylor``): the widget shows and sets the selection's
        sel = self.selection
        toggle = pn.widgets.RadioButtonGroup(
            options={label: key for key, label in TAYLOR_SCALES.items()}, value=sel.taylor, color="light",
            margin=(4, 10), sizing_mode="fixed", width=620, css_classes=["gs-taylor-scale"],
        )
        toggle.param.watch(lambda event: setattr(sel, "taylor", event.new), "value")
        doc = pn.state.curdoc
        sel.param.watch(lambda event: on_document(doc, lambda: setattr(toggle, "value", event.new)), "taylor")
        return [toggle]

    def key(self, request: Request) -> Any:
        return (request.variable, request.level, request.reference, request.models, request.region, request.season, request.period,
                request.target_grid, request.taylor)

    async def load(self, request: Request) -> dict[str, Any]:
        results = self.results
        args = (request.reference, request.variable, request.period, request.region, request.season, request.level, request.target_grid)
        tidy = await results.fetch(("scores",) + args, results.scores, *args)
        unit_args = (*args[:3], request.level, request.target_grid)  # the same comparison as the scores
        units = await results.fetch(("units",) + unit_args, results.units, *unit_args)
        alternatives = await self.alternatives(request)
        # members of a ticked ensemble (app.views.series.ensemble_members): drawn as its cloud
        members = [m for m in ensemble_members(results, request) if m not in request.models]
        # the runs and the alternative references, all scored against the selected reference
        mine = tidy[(tidy["reference"] == request.reference) & tidy["model"].isin([*request.models, *alternatives, *members])]
        return {"tidy": mine, "units": units, "alternatives": alternatives, "members": members}

    def figure(self, data: dict[str, Any], request: Request) -> hv.Overlay | None:
        normalised = request.taylor == "normalised"
        points, ref_std = taylor_points(data["tidy"], normalised=normalised)
        if points.empty or not np.isfinite(ref_std):
            return None
        half = bool((points["corr"] < 0).any())  # negative correlations need the left half
        top = 1.25 * max(float(points["std"].max()), ref_std)
        step = _nice_step(top)
        top = step * math.ceil(top / step)
        theta_max = math.pi if half else math.pi / 2
        t = np.linspace(0.0, theta_max, 181)
        layers: list[hv.Element] = []
        # standard-deviation arcs around the origin
        for r in np.arange(step, top + step / 2, step):
            dash = "solid" if math.isclose(r, top) else "dotted"
            layers.append(_line(r * np.cos(t), r * np.sin(t), colour=_GRID, dash=dash))
        # reference standard deviation arc
        layers.append(_line(ref_std * np.cos(t), ref_std * np.sin(t), colour=REFERENCE_COLOUR, dash="dashed", width=1.0))
        # correlation rays and their labels on the outer arc
        ticks = [c for c in _CORRELATION_TICKS] + ([-c for c in _CORRELATION_TICKS if c > 0] if half else [])
        labels = []
        for c in ticks:
            a = math.acos(c)
            layers.append(_line([0, top * math.cos(a)], [0, top * math.sin(a)], colour=_GRID, dash="dotted"))
            # nudge the label of R = 0 off the vertical axis line
            nudge = 0.04 * top if c == 0 else 0.0
            labels.append((1.05 * top * math.cos(a) + nudge, 1.05 * top * math.sin(a), f"{c:g}"))
        layers.append(_labels(labels, colour="#4b5563"))
        heading = math.pi / 4 if not half else math.pi / 2
        layers.append(_labels([(1.13 * top * math.cos(heading), 1.13 * top * math.sin(heading), "Correlation")],
                              colour="#374151", angle=math.degrees(heading) - 90))
        # centred RMS difference arcs around the reference point, clipped to the diagram
        rms_labels = []
        for e in np.arange(step, 2 * top, step):
            phi = np.linspace(0.0, math.pi, 361)
            x, y = ref_std + e * np.cos(phi), e * np.sin(phi)
            inside = (np.hypot(x, y) <= top) & (np.arctan2(y, x) <= theta_max + 1e-9)
            if inside.sum() < 2:
                continue
            layers.append(_line(np.where(inside, x, np.nan), np.where(inside, y, np.nan), colour=_RMS, dash="dashed", width=1.0))
            k = int(np.flatnonzero(inside)[len(np.flatnonzero(inside)) // 2])
            rms_labels.append((x[k], y[k], f"{e:g}"))
        if rms_labels:
            layers.append(_labels(rms_labels, colour=_RMS))
        # the reference and the runs
        layers.append(_points(pd.DataFrame({"x": [ref_std], "y": [0.0], "model": [request.reference], "corr": [1.0], "std": [ref_std], "crmse": [0.0]}),
                              label=f"{request.reference} (reference)", colour=REFERENCE_COLOUR, marker="square"))
        alternatives = data.get("alternatives", [])
        cloud = points[points["model"].isin(data.get("members", []))]
        for name in request.models:  # each ticked ensemble's members as a cloud of small points in its colour
            mine = cloud[cloud["model"].isin(members_of_ensemble(self.results, name))]
            if len(mine):
                ensemble = name[: -len(MEAN_SUFFIX)] if name.endswith(MEAN_SUFFIX) else name
                layers.append(_points(mine, label=f"{ensemble}: members ({len(mine)})", colour=self.results.colour(name)).opts(size=7, alpha=0.6, backend="bokeh"))
        for _, row in points.iterrows():
            name = str(row["model"])
            if name in data.get("members", []):
                continue
            if name in alternatives:  # another reference, scored against the selected one as if it were a run
                layers.append(_points(pd.DataFrame([row]), label=f"{name} (alternative reference)", colour=REFERENCE_COLOUR, marker="diamond"))
            else:
                layers.append(_points(pd.DataFrame([row]), label=name, colour=self.results.colour(name)))
        axis = "Standard deviation (normalised)" if normalised else f"Standard deviation ({data['units']})"
        title = plot_title(f"Taylor diagram: {request.variable}, {region_label(request.region)}, {request.season} {request.period}")
        xlim = (-top * 1.2 if half else 0.0, top * 1.2)
        ylim = (0.0, top * 1.2)
        radii = [round(float(v), 10) for v in np.arange(0.0, top + step / 2, step)]
        xticks = [-r for r in radii[:0:-1]] + radii if half else radii
        # Equal scales on both axes keep the arcs circular: frame sizes in the ratio of the ranges.
        frame_width = 760 if half else 520
        frame_height = int(round(frame_width * (ylim[1] - ylim[0]) / (xlim[1] - xlim[0])))
        overlay = hv.Overlay(layers)
        return overlay.opts(
            title=title, xlabel=axis, ylabel=axis,
            xlim=xlim, ylim=ylim, frame_width=frame_width, frame_height=frame_height, xticks=xticks, yticks=radii,
            legend_position="right", show_grid=False, toolbar="above", backend="bokeh",
        ).opts(
            title=title, xlabel=axis, ylabel=axis,
            xlim=xlim, ylim=ylim, xticks=xticks, yticks=radii, aspect="equal", fig_inches=(8, 6), legend_position="right", backend="matplotlib",
        )

    def draw(self, data: dict[str, Any], request: Request) -> pn.viewable.Viewable:
        figure = self.figure(data, request)
        if figure is None:
            return pn.pane.HTML('<div class="gs-empty">No correlation or standard deviation to place: the fields may be constant.</div>')
        # Fixed size: stretching the width would break the equal scales of the two axes.
        return figure_pane(figure, sizing_mode="fixed")


_MPL_DASH = {"solid": "-", "dashed": "--", "dotted": ":"}
_POINT_DIMS = [hv.Dimension("model", label="Source"), hv.Dimension("corr", label="Correlation"),
               hv.Dimension("std", label="Std dev"), hv.Dimension("crmse", label="Centred RMS difference")]


def _line(x: Any, y: Any, *, colour: str, dash: str, width: float = 0.8) -> hv.Curve:
    return hv.Curve((np.asarray(x, dtype="float64"), np.asarray(y, dtype="float64")), "x", "y").opts(
        color=colour, line_dash=dash, line_width=width, tools=[], backend="bokeh"
    ).opts(color=colour, linestyle=_MPL_DASH[dash], linewidth=width, backend="matplotlib")


def _labels(items: list[tuple[float, float, str]], *, colour: str, angle: float = 0.0) -> hv.Labels:
    return hv.Labels(items, ["x", "y"], "text").opts(text_color=colour, text_font_size="10pt", angle=angle, backend="bokeh").opts(
        color=colour, size=9, rotation=angle, backend="matplotlib"
    )


def _points(frame: pd.DataFrame, *, label: str, colour: str, marker: str = "circle") -> hv.Points:
    points = hv.Points(frame, ["x", "y"], _POINT_DIMS, label=label)
    return points.opts(color=colour, size=13, marker=marker, line_color="white", tools=["hover"],
                       hover_tooltips=[("Source", "@model"), ("Correlation", "@corr{0.000}"), ("Std dev", "@std{0.000}"),
                                       ("Centred RMS difference", "@crmse{0.000}")], backend="bokeh").opts(
        color=colour, s=80, marker={"square": "s", "diamond": "D"}.get(marker, "o"), edgecolors="white", backend="matplotlib"
    )
