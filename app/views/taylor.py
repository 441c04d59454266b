"""Taylor (2001) diagram of the selected runs against the reference.

Radius is the spatial standard deviation (optionally divided by the reference's), the
angle from the horizontal axis is ``arccos(correlation)``, and the distance from the
reference point is the centred RMS difference, drawn as arcs around that point; the law
of cosines ``E'² = σ_m² + σ_r² − 2 σ_m σ_r R`` (Taylor 2001, eq. 2) makes the three agree.
The numbers are the core's scores (``std_ratio``, ``corr``, ``crmse``).

When the points crowd into a small part of the quarter circle (runs of a well-simulated
field all lie near the reference point), a close-up of that part is drawn beside the
whole diagram: the same geometry at a larger scale (equal scales on both axes), with its
standard-deviation arcs, correlation rays and centred-RMS arcs labelled where they cross
the close-up, and every point named beside it.
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

__all__ = ["CLOSE_UP_SHARE", "TaylorView", "close_up_window", "place_labels", "taylor_points"]

_CORRELATION_TICKS = (0.0, 0.2, 0.4, 0.6, 0.8, 0.9, 0.95, 0.99)
_GRID = "#c9c4b8"
_RMS = "#3f8f5f"
#: A close-up is drawn beside the whole diagram when the points (with the reference point)
#: fit in a box whose longer side is less than this share of the diagram's radius.
CLOSE_UP_SHARE = 0.4
#: Frame widths in pixels: the diagram alone, and the whole diagram beside a close-up.
_ALONE_WIDTH, _WHOLE_WIDTH, _CLOSE_WIDTH = 520, 360, 470
#: Labels: font size, estimated width of a character and height of a line in pixels (10 pt
#: sans-serif; the estimate errs wide), and the gap between a point's centre and its name.
_FONT, _CHAR_PX, _LINE_PX, _GAP_PX = "10pt", 8.0, 16.0, 9.0


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


def _nice_step(top: float, parts: float = 4.0) -> float:
    raw = top / parts
    power = 10 ** math.floor(math.log10(raw))
    return next(s * power for s in (1, 2, 2.5, 5, 10) if s * power >= raw)


def close_up_window(x: np.ndarray, y: np.ndarray, *, top: float, width: float = _CLOSE_WIDTH) -> tuple[tuple[float, float], tuple[float, float]] | None:
    """The close-up's ``(xlim, ylim)`` around the points, or None when they are not crowded.

    Parameters
    ----------
    x, y
        Cartesian positions of every point drawn, the reference point included.
    top
        The whole diagram's outer radius.
    width
        Frame width of the close-up in pixels (sets the strip under the ``R = 1`` axis).

    Notes
    -----
    The box around the points (at least 1 % of ``top`` across) is padded by 18 % of its longer side; its height is kept
    between 0.55 and 1 times its width (the frame's shape; both axes keep one scale), and
    a strip of 26 pixels below the ``R = 1`` axis (``y = 0``) holds the standard-deviation
    labels.  None when the padded box is longer than :data:`CLOSE_UP_SHARE` of ``top``.
    """
    x, y = np.asarray(x, dtype="float64"), np.asarray(y, dtype="float64")
    keep = np.isfinite(x) & np.isfinite(y)
    if keep.sum() < 2:
        return None
    x, y = x[keep], y[keep]
    x0, x1, y1 = float(x.min()), float(x.max()), float(max(y.max(), 0.0))
    span = max(x1 - x0, y1, 0.01 * top)  # runs identical to the reference: no close-up finer than 1 % of the diagram
    if x1 - x0 < span:
        middle = (x0 + x1) / 2.0
        x0, x1 = middle - span / 2.0, middle + span / 2.0
    pad = 0.18 * span
    x0, x1, y1 = x0 - pad, x1 + pad, y1 + pad
    if max(x1 - x0, y1) >= CLOSE_UP_SHARE * top:
        return None
    ratio = y1 / (x1 - x0)
    if ratio < 0.55:
        y1 = 0.55 * (x1 - x0)
    elif ratio > 1.0:
        grow = (y1 - (x1 - x0)) / 2.0
        x0, x1 = x0 - grow, x1 + grow
    y0 = -26.0 * (x1 - x0) / width  # the strip for the standard-deviation labels
    return (x0, x1), (y0, y1)


#: Where a name may go around its point: (dx, dy) direction in pixels, text_align, text_baseline.
_PLACES = (
    (1, 0, "left", "middle"), (-1, 0, "right", "middle"), (0, 1, "center", "bottom"), (0, -1, "center", "top"),
    (0.75, 0.75, "left", "bottom"), (-0.75, 0.75, "right", "bottom"), (0.75, -0.75, "left", "top"), (-0.75, -0.75, "right", "top"),
)


#: Distances of the places from the point, in gaps (:data:`_GAP_PX`): near first.
_RINGS = (1.0, 2.2, 3.6)


def _box(px: float, py: float, align: str, baseline: str, text: str) -> tuple[float, float, float, float]:
    """Pixel box ``(left, bottom, right, top)`` of a text anchored at ``(px, py)`` (y up)."""
    w, h = _CHAR_PX * len(text), _LINE_PX
    left = {"left": px, "right": px - w, "center": px - w / 2}[align]
    bottom = {"bottom": py, "top": py - h, "middle": py - h / 2}[baseline]
    return left, bottom, left + w, bottom + h


def _overlap(a: tuple[float, float, float, float], b: tuple[float, float, float, float]) -> float:
    """Area shared by two boxes (0 when apart)."""
    return max(0.0, min(a[2], b[2]) - max(a[0], b[0])) * max(0.0, min(a[3], b[3]) - max(a[1], b[1]))


def place_labels(points: list[tuple[float, float, str]], *, obstacles: list[tuple[float, float, float, float]],
                 markers: list[tuple[float, float]], frame: tuple[float, float], radius: float = 7.0) -> list[tuple[float, float, str, str, str]]:
    """Names beside their points (pixel coordinates, y up), without overlaps where feasible.

    Parameters
    ----------
    points
        ``(px, py, text)`` of each point to name, in pixels from the frame's lower left.
    obstacles
        Pixel boxes already taken (other labels).
    markers
        Centres of every point drawn (names should not cover them).
    frame
        ``(width, height)`` of the frame in pixels: names stay inside.
    radius
        Half the marker size in pixels.

    Returns
    -------
    list
        ``(px, py, text, text_align, text_baseline)`` per point, in the order given.

    Notes
    -----
    Greedy, points nearest others first: each name takes the first of eight places around
    its point (right, left, above, below, then the diagonals; then the same a little and
    much farther out) that stays inside the frame and overlaps no name placed before, no
    obstacle and no marker; when every place overlaps something, the one with the least
    overlapped area.  Hand-written: the plotting
    libraries here have no label placement, and this is a few lines.
    """
    taken = list(obstacles)
    dots = [(mx - radius, my - radius, mx + radius, my + radius) for mx, my in markers]
    crowding = [sum(math.hypot(px - qx, py - qy) < 60.0 for qx, qy in markers) for px, py, _ in points]
    order = sorted(range(len(points)), key=lambda i: -crowding[i])
    placed: dict[int, tuple[float, float, str, str, str]] = {}
    for i in order:
        px, py, text = points[i]
        best: tuple[float, tuple[float, float, str, str, str], tuple[float, float, float, float]] | None = None
        for (dx, dy, align, baseline), ring in ((place, ring) for ring in _RINGS for place in _PLACES):
            ax, ay = px + _GAP_PX * ring * dx, py + _GAP_PX * ring * dy
            box = _box(ax, ay, align, baseline, text)
            outside = max(0.0, -box[0]) + max(0.0, box[2] - frame[0]) + max(0.0, -box[1]) + max(0.0, box[3] - frame[1])
            own = (px - radius, py - radius, px + radius, py + radius)
            cost = 1e6 * outside + sum(_overlap(box, t) for t in taken) + sum(_overlap(box, d) for d in dots if d != own)
            if best is None or cost < best[0]:
                best = (cost, (ax, ay, text, align, baseline), box)
            if cost == 0.0:
                break
        assert best is not None
        placed[i] = best[1]
        taken.append(best[2])
    return [placed[i] for i in range(len(points))]


def _correlation_candidates() -> list[float]:
    """Correlations worth a ray: tenths, then 1 - k 10^-d for k in 1, 2, 5 (0.95, 0.98, 0.99, 0.995 …)."""
    values = {round(c / 10, 1) for c in range(0, 10)}
    for d in range(1, 7):
        for k in (1, 2, 5):
            values.add(round(1.0 - k * 10.0 ** -d, d + 1))
    values |= {-v for v in values}
    return sorted(v for v in values if -1.0 < v < 1.0)


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
        "the observations do. An ensemble's mean is one point; its members are the small points around it. "
        "When the points crowd into a small part of the diagram, a close-up of that part is drawn beside it at a "
        "larger scale, same geometry: σ labels the standard-deviation arcs, R the correlation rays, E′ the "
        "centred RMS difference arcs, and each point is named."
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

    @staticmethod
    def _keys(request: Request) -> tuple[tuple, tuple]:
        """The arguments of the scores, and of the comparison's units and other references
        (:meth:`ResultView.alternatives`)."""
        args = (request.reference, request.variable, request.period, request.region, request.season, request.level, request.target_grid)
        return args, (*args[:3], request.level, request.target_grid)  # the same comparison as the scores

    async def load(self, request: Request) -> dict[str, Any]:
        results = self.results
        args, unit_args = self._keys(request)
        tidy = await results.fetch(("scores",) + args, results.scores, *args)
        units = await results.fetch(("units",) + unit_args, results.units, *unit_args)
        alternatives = await self.alternatives(request)
        return self._data(request, tidy, units, alternatives)

    def ready(self, request: Request) -> dict[str, Any] | None:
        """The diagram's numbers when the scores, units and other references are already computed
        (a change back to a region seen before is drawn without the round trip of :meth:`load`)."""
        products = self.results.products
        args, unit_args = self._keys(request)
        found = [products.get(key, None) for key in (("scores",) + args, ("units",) + unit_args, ("alternatives",) + unit_args)]
        return None if any(f is None for f in found) else self._data(request, *found)

    def _data(self, request: Request, tidy: Any, units: str, alternatives: list[str]) -> dict[str, Any]:
        # members of a ticked ensemble (app.views.series.ensemble_members): drawn as its cloud
        members = [m for m in ensemble_members(self.results, request) if m not in request.models]
        # the runs and the alternative references, all scored against the selected reference
        mine = tidy[(tidy["reference"] == request.reference) & tidy["model"].isin([*request.models, *alternatives, *members])]
        return {"tidy": mine, "units": units, "alternatives": alternatives, "members": members}

    def figure(self, data: dict[str, Any], request: Request) -> hv.Overlay | hv.Layout | None:
        normalised = request.taylor == "normalised"
        points, ref_std = taylor_points(data["tidy"], normalised=normalised)
        if points.empty or not np.isfinite(ref_std):
            return None
        half = bool((points["corr"] < 0).any())  # negative correlations need the left half
        top = 1.25 * max(float(points["std"].max()), ref_std)
        step = _nice_step(top)
        top = step * math.ceil(top / step)
        window = close_up_window(np.r_[points["x"].to_numpy(), ref_std], np.r_[points["y"].to_numpy(), 0.0], top=top)
        axis = "Standard deviation (normalised)" if normalised else f"Standard deviation ({data['units']})"
        title = plot_title(f"Taylor diagram: {request.variable}, {region_label(request.region)}, {request.season} {request.period}")
        whole = self._whole(points, ref_std, data, request, top=top, step=step, half=half, axis=axis, title=title,
                            frame_width=_ALONE_WIDTH if window is None else _WHOLE_WIDTH, window=window)
        if window is None:
            return whole
        close = self._close_up(points, ref_std, data, request, window=window, theta_max=math.pi if half else math.pi / 2)
        # the report figure: the legend inside the whole diagram's empty corner, the close-up as
        # large as on the page relative to its 9 pt labels (their places are chosen for that scale)
        whole = whole.opts(legend_position="top_right", fig_inches=(5.5, 5.5), backend="matplotlib")
        return hv.Layout([whole, close]).cols(2).opts(shared_axes=False, backend="bokeh").opts(
            sublabel_format="", fig_inches=(13, 6.5), backend="matplotlib")

    def _sources(self, points: pd.DataFrame, ref_std: float, data: dict[str, Any], request: Request, *, legend: bool) -> list[hv.Element]:
        """The reference point, each ticked ensemble's members and the runs and other references."""
        layers: list[hv.Element] = []
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
        if not legend:
            layers = [layer.opts(show_legend=False, backend="bokeh").opts(show_legend=False, backend="matplotlib") for layer in layers]
        return layers

    def _whole(self, points: pd.DataFrame, ref_std: float, data: dict[str, Any], request: Request, *, top: float, step: float, half: bool,
               axis: str, title: str, frame_width: int, window: tuple[tuple[float, float], tuple[float, float]] | None = None) -> hv.Overlay:
        """The whole quarter (or half) circle, from the origin to beyond the farthest point;
        the close-up's ``window``, if any, outlined."""
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
        if window is not None:
            (x0, x1), (_, y1) = window
            layers.append(hv.Bounds((x0, 0.0, x1, y1)).opts(color="#6b7280", line_width=1, backend="bokeh").opts(
                color="#6b7280", linewidth=0.8, backend="matplotlib"))
        layers += self._sources(points, ref_std, data, request, legend=True)
        xlim = (-top * 1.2 if half else 0.0, top * 1.2)
        ylim = (0.0, top * 1.2)
        radii = [round(float(v), 10) for v in np.arange(0.0, top + step / 2, step)]
        xticks = [-r for r in radii[:0:-1]] + radii if half else radii
        # Equal scales on both axes keep the arcs circular: frame sizes in the ratio of the ranges.
        frame_width = int(frame_width * (760 / 520)) if half else frame_width
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

    def _close_up(self, points: pd.DataFrame, ref_std: float, data: dict[str, Any], request: Request, *,
                  window: tuple[tuple[float, float], tuple[float, float]], theta_max: float) -> hv.Overlay:
        """The crowded part of the diagram at a larger scale, every arc and point labelled."""
        (x0, x1), (y0, y1) = window
        width = _CLOSE_WIDTH
        height = int(round(width * (y1 - y0) / (x1 - x0)))
        scale = width / (x1 - x0)  # pixels per data unit, the same on both axes
        px = 1.0 / scale
        corners = [(x0, 0.0), (x1, 0.0), (x0, y1), (x1, y1)]
        near = (min(max(0.0, x0), x1), 0.0)  # the box's point nearest the origin (the box reaches y = 0)
        r_lo, r_hi = math.hypot(*near), max(math.hypot(x, y) for x, y in corners)
        t_hi = min(max(math.atan2(y, x) for x, y in corners), theta_max)
        t = np.linspace(0.0, t_hi, 400)
        layers: list[hv.Element] = [_line([x0, x1], [0.0, 0.0], colour="#8a8578", dash="solid")]  # the R = 1 axis
        texts: list[tuple[float, float, str, str, str, str]] = []  # x, y, text, colour, align, baseline
        # standard-deviation arcs: labelled under the R = 1 axis, or where they leave through the right side
        step = _nice_step(max(r_hi - r_lo, 1e-12), 6.0)
        for r in np.arange(math.ceil(r_lo / step) * step, r_hi, step):
            r = round(float(r), 12)
            if r <= 0:
                continue
            layers.append(_line(r * np.cos(t), r * np.sin(t), colour=_GRID, dash="dotted"))
            if x0 <= r <= x1:
                texts.append((r, -7.0 * px, f"σ={r:g}", "#4b5563", "center", "top"))
            elif r > x1 - 3 * px and math.sqrt(r * r - (x1 - 3 * px) ** 2) < y1 - 16 * px:  # on the arc, just inside the right side
                texts.append((x1 - 3 * px, math.sqrt(r * r - (x1 - 3 * px) ** 2), f"σ={r:g}", "#4b5563", "right", "bottom"))
        layers.append(_line(ref_std * np.cos(t), ref_std * np.sin(t), colour=REFERENCE_COLOUR, dash="dashed", width=1.0))
        # correlation rays, labelled on the ray just inside the edge it leaves by
        for c in _close_up_correlations(t_hi):
            a = math.acos(c)
            ca, sa = math.cos(a), math.sin(a)
            layers.append(_line([r_lo * ca, 1.01 * r_hi * ca], [r_lo * sa, 1.01 * r_hi * sa], colour=_GRID, dash="dotted"))
            exits = [(y1 / sa, "top")] + ([(x1 / ca, "right")] if ca > 0 else [(x0 / ca, "left")] if ca < 0 else [])
            reach, edge = min(exits)
            if reach * 0.999 <= r_lo:
                continue
            back = {"top": 4.0, "right": 6.0, "left": 6.0}[edge] * px / (sa if edge == "top" else abs(ca))
            at = reach - back
            align, baseline = {"top": ("center", "top"), "right": ("right", "bottom"), "left": ("left", "bottom")}[edge]
            texts.append((at * ca, at * sa, f"R={c:g}", "#4b5563", align, baseline))
        # centred RMS difference arcs around the reference point, labelled in the middle of their visible part
        e_hi = max(math.hypot(x - ref_std, y) for x, y in corners)
        e_step = _nice_step(e_hi, 5.0)
        phi = np.linspace(0.0, math.pi, 1441)
        for e in np.arange(e_step, e_hi, e_step):
            e = round(float(e), 12)
            x, y = ref_std + e * np.cos(phi), e * np.sin(phi)
            drawn = np.arctan2(y, x) <= theta_max + 1e-9
            inside = drawn & (x >= x0 + 20 * px) & (x <= x1 - 20 * px) & (y >= 12 * px) & (y <= y1 - 12 * px)
            if drawn.sum() < 2:
                continue
            layers.append(_line(np.where(drawn, x, np.nan), np.where(drawn, y, np.nan), colour=_RMS, dash="dashed", width=1.0))
            if inside.any():
                k = int(np.flatnonzero(inside)[len(np.flatnonzero(inside)) // 2])
                texts.append((float(x[k]), float(y[k]), f"E′={e:g}", _RMS, "center", "middle"))
        # an arc's label that would cover one written before it, or cross the frame, is left out (the arc stays drawn)
        kept: list[tuple[float, float, str, str, str, str]] = []
        boxes: list[tuple[float, float, float, float]] = []
        for item in texts:
            x, y, text, _, align, baseline = item
            box = _box((x - x0) * scale, (y - y0) * scale, align, baseline, text)
            within = box[0] >= 0 and box[1] >= 0 and box[2] <= width and box[3] <= height
            if within and all(_overlap(box, other) == 0.0 for other in boxes):
                kept.append(item)
                boxes.append(box)
        texts = kept
        # the points, and their names placed around them
        layers += self._sources(points, ref_std, data, request, legend=False)
        members = set(data.get("members", []))
        named = [(ref_std, 0.0, _short(request.reference))] + [(float(r.x), float(r.y), _short(str(r.model)))
                                                               for r in points.itertuples() if r.model not in members]
        markers = [((float(x) - x0) * scale, (float(y) - y0) * scale) for x, y in zip(np.r_[points["x"], ref_std], np.r_[points["y"], 0.0], strict=True)]
        names = place_labels([((x - x0) * scale, (y - y0) * scale, text) for x, y, text in named], obstacles=boxes, markers=markers,
                             frame=(width, height))
        for x, y, text, align, baseline in names:
            texts.append((x0 + x * px, y0 + y * px, text, "#111827", align, baseline))
        groups: dict[tuple[str, str, str], list[tuple[float, float, str]]] = {}
        for x, y, text, colour, align, baseline in texts:
            groups.setdefault((colour, align, baseline), []).append((x, y, text))
        for (colour, align, baseline), items in groups.items():
            layers.append(_labels(items, colour=colour, align=align, baseline=baseline))
        overlay = hv.Overlay(layers)
        title = "Close-up near the reference point"
        return overlay.opts(
            title=title, xlim=(x0, x1), ylim=(y0, y1), frame_width=width, frame_height=height, xaxis=None, yaxis=None,
            show_legend=False, show_grid=False, toolbar="above", backend="bokeh",
        ).opts(
            title=title, xlim=(x0, x1), ylim=(y0, y1), xaxis=None, yaxis=None, aspect="equal", fig_inches=(5.5, 5.5 * height / width),
            show_legend=False, backend="matplotlib",
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


def _labels(items: list[tuple[float, float, str]], *, colour: str, angle: float = 0.0, align: str = "center",
            baseline: str = "middle") -> hv.Labels:
    labels = hv.Labels(items, ["x", "y"], "text").opts(text_color=colour, text_font_size=_FONT, angle=angle, text_align=align,
                                                       text_baseline=baseline, backend="bokeh")
    return labels.opts(color=colour, size=9, rotation=angle, horizontalalignment=align,
                       verticalalignment={"middle": "center"}.get(baseline, baseline), backend="matplotlib")


def _short(name: str, most: int = 28) -> str:
    """A name as the close-up writes it: long ones cut with an ellipsis (the legend and the
    hover of the whole diagram give them in full)."""
    return name if len(name) <= most else name[: most - 1] + "…"


def _close_up_correlations(t_hi: float, most: int = 6) -> list[float]:
    """Correlations whose rays cross a close-up reaching the angle ``t_hi`` (R = 1 is its axis).

    The roundest values first (fewest decimals), each at least 1/(most + 2) of the angle
    from the others already taken and from the axis, at most ``most`` rays.
    """
    gap = t_hi / (most + 2)
    inside = [c for c in _correlation_candidates() if gap <= math.acos(c) < 0.98 * t_hi]  # not crowding the R = 1 axis
    inside.sort(key=lambda c: (len(f"{c:g}"), -c))
    taken: list[float] = []
    for c in inside:
        if len(taken) < most and all(abs(math.acos(c) - math.acos(o)) >= gap for o in taken):
            taken.append(c)
    return sorted(taken, reverse=True)


def _points(frame: pd.DataFrame, *, label: str, colour: str, marker: str = "circle") -> hv.Points:
    points = hv.Points(frame, ["x", "y"], _POINT_DIMS, label=label)
    return points.opts(color=colour, size=13, marker=marker, line_color="white", tools=["hover"],
                       hover_tooltips=[("Source", "@model"), ("Correlation", "@corr{0.000}"), ("Std dev", "@std{0.000}"),
                                       ("Centred RMS difference", "@crmse{0.000}")], backend="bokeh").opts(
        color=colour, s=80, marker={"square": "s", "diamond": "D"}.get(marker, "o"), edgecolors="white", backend="matplotlib"
    )
