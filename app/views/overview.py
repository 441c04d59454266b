"""Overview: every run's relative error for every variable, as ranked lollipops.

One narrow panel per variable, one row per run, the runs ranked (best first) by the
median of their relative errors over the values they have.  A run's value is a dot on a horizontal
stem from the centre line, which is the median run: ``(E − median E) / median E``
(Gleckler et al. 2008), where ``E`` is the run's RMSE against the variable's reference
and the median is over the runs shown that hold the variable.  Left of the line (teal)
is a smaller error than the typical run, right (orange) a larger one.  "By season" and
"by region" give every run one sub-row per season or region, so a run's pattern across
them reads as a short profile inside its band.

Position along a shared axis carries the value (read more exactly than a colour), the
run order carries the ranking, and the sub-rows are labelled with the season or region
they show.  The numbers come from :mod:`evaluation.relative`; this module only draws.
"""

from __future__ import annotations

from typing import Any

import holoviews as hv
import numpy as np
import pandas as pd
import panel as pn
from bokeh.layouts import row as bokeh_row
from bokeh.models import BasicTickFormatter, ColumnDataSource, FixedTicker, Grid, HoverTool, Range1d
from bokeh.plotting import figure as bokeh_figure

from evaluation.regions import REGIONS, parse_region
from evaluation.relative import relative_error_table, run_order

from ..state import OVERVIEW_BY, Request
from .base import ResultView, on_document, plot_title, text_html
from .look import BETTER, INK, MUTED, WORSE
from .maps import canvas_text
from .results import OVERVIEW_SEASONS, overview_args

__all__ = ["OverviewView", "axis_cap", "describe", "overview_table", "row_positions", "shorten"]

_SEASONS = OVERVIEW_SEASONS
#: Milliseconds between two updates of the progress line while the overview is computed.
PROGRESS_MS = 400
#: Blank sub-rows between two runs' bands when each run has several sub-rows.
GAP = 0.8
#: The axis reaches the smallest of these that holds nine in ten values; values beyond it
#: are drawn at the edge with an arrow head (hover gives the value).
CAPS = (0.25, 0.5, 1.0)
_BAND = "#eef2f1"
#: Pixels the figure may take beside the sidebar on a 1500-pixel-wide screen, and those of the run names.
WIDTH = 1050
NAME_PX = 150
#: Characters of a run name that fit in NAME_PX at 10 pt bold; longer names take two lines (hover has them whole).
NAME_CHARS = 20


def _variable_label(variable: str, level: Any) -> str:
    """A variable on levels is shown on its level: ``ta 500 hPa``."""
    return f"{variable} {level}" if isinstance(level, str) and level else str(variable)


def _part_label(by: str, part: str) -> str:
    """A sub-row's label: the season, or the region's name without its latitudes."""
    if by == "region":
        return parse_region(part).label.split(" (")[0]
    return str(part) if by == "season" else ""


def overview_table(tidy: pd.DataFrame, ties: pd.DataFrame | None, by: str) -> pd.DataFrame:
    """The overview's values: :func:`evaluation.relative.relative_error_table` of ``tidy``
    with ``label`` (variable [level]), ``part`` (season or region id for ``by`` = season or
    region, else empty) and ``tied`` (within observational uncertainty of the best run).
    """
    table = relative_error_table(tidy)
    if table.empty:
        return table.assign(label=[], part=[], tied=[])
    table["label"] = [_variable_label(v, lv) for v, lv in zip(table["variable"], table.get("level", [""] * len(table)), strict=True)]
    table["part"] = table[by].astype(str) if by in ("season", "region") else ""
    tied: set[tuple[str, ...]] = set()
    if ties is not None and not ties.empty:
        tied = {
            (str(m), _variable_label(v, lv), str(r), str(s))
            for m, v, lv, r, s in ties[["model", "variable", "level", "region", "season"]].itertuples(index=False, name=None)
        }
    table["tied"] = [(str(m), lab, str(r), str(s)) in tied for m, lab, r, s in table[["model", "label", "region", "season"]].itertuples(index=False, name=None)]
    return table


def row_positions(runs: list[str], parts: list[str]) -> tuple[dict[tuple[str, str], float], dict[str, float], tuple[float, float]]:
    """Vertical positions: ``(run, part) -> y``, ``run -> y of its band's centre`` and the y range.

    The first run is at the top (y = 0, going down); each run has one sub-row per part and
    a gap of :data:`GAP` rows before the next run when there are several parts.
    """
    k = max(1, len(parts))
    step = k + (GAP if k > 1 else 0.0)
    y = {(r, p): -(i * step + j) for i, r in enumerate(runs) for j, p in enumerate(parts)}
    centre = {r: -(i * step + (k - 1) / 2) for i, r in enumerate(runs)}
    bottom = -((len(runs) - 1) * step + k - 1)
    return y, centre, (bottom - 0.7, 0.7)


def axis_cap(values: Any) -> float:
    """Half the width of the shared axis: the smallest of :data:`CAPS` that holds nine in ten
    finite values (the largest when more lie beyond it)."""
    finite = np.abs(np.asarray(values, dtype="float64"))
    finite = finite[np.isfinite(finite)]
    if finite.size == 0:
        return CAPS[-1]
    reach = float(np.quantile(finite, 0.9))
    return next((c for c in CAPS if reach <= c), CAPS[-1])


def shorten(text: str, limit: int = NAME_CHARS) -> str:
    """``text`` on at most two lines of ``limit`` characters, broken at a space where one is
    (else cut), a cut marked with "…"."""
    if len(text) <= limit:
        return text
    head = text[: limit + 1].rpartition(" ")[0] or text[:limit]
    rest = text[len(head):].strip()
    second = rest if len(rest) <= limit else rest[: limit - 1].rstrip() + "…"
    return f"{head}\n{second}"


def _number(value: float, units: str = "") -> str:
    if not np.isfinite(value):
        return "—"
    text = f"{value:.4g}"
    return f"{text} {units}".strip()


def _signed(value: float) -> str:
    if not np.isfinite(value):
        return "—"
    return "0.00" if abs(value) < 0.005 else f"{value:+.2f}"  # no "-0.00"


def _ordered_parts(table: pd.DataFrame, by: str) -> list[str]:
    present = list(dict.fromkeys(table["part"]))
    canonical = list(_SEASONS) if by == "season" else list(REGIONS) if by == "region" else []
    return [p for p in canonical if p in present] + [p for p in present if p not in canonical]


#: What hovering a dot shows (columns of the dots' data).
_TOOLTIPS = [
    ("Run", "@{model}"), ("Variable", "@{label}"), ("Where, when", "@{where}"), ("Reference", "@{reference}"), ("Period", "@{period}"),
    ("RMSE", "@{rmse_text}"), ("Median RMSE", "@{median_text}"), ("Runs in the median", "@{n_runs}"),
    ("Relative error", "@{rel_text}"), ("Rank", "@{rank_text}"),
]


def _layout(table: pd.DataFrame, by: str) -> tuple:
    """The figure's arrangement: runs (ranked), parts, variable labels, row positions
    (:func:`row_positions`), parts per run, the panels' height, the label panel's and a
    variable panel's width, the axis cap and the x range."""
    runs = run_order(table)
    parts = _ordered_parts(table, by) if by in ("season", "region") else [""]
    labels = list(dict.fromkeys(table["label"]))
    y, centre, ylim = row_positions(runs, parts)
    k = len(parts)
    row_px = 30 if k == 1 else 15 if k <= 5 else 14  # 8 pt sub-row names need 13 px
    height = int(row_px * (ylim[1] - ylim[0]))
    # run names take NAME_PX; sub-row names what the longest needs (8 pt, about 6 px a character)
    label_width = NAME_PX + (0 if k == 1 else 12 + 6 * max(len(_part_label(by, p)) for p in parts))
    panel_width = int(np.clip((WIDTH - label_width) / len(labels) - 18, 60, 220))
    cap = axis_cap(table["rel_error"])
    return runs, parts, labels, y, centre, ylim, k, height, label_width, panel_width, cap, (-cap * 1.12, cap * 1.12)


def describe(table: pd.DataFrame, request: Request, *, short: bool = False) -> str:
    """What the overview shows, in words: runs, references, where, when, periods and the median.

    The region and season named are those of the values (every season or region of the
    sub-view), the references and periods those each variable was scored with.
    """
    by = request.overview_by
    parts = _ordered_parts(table, by)
    per_ref = table.groupby("reference", sort=False)["label"].unique()
    if len(per_ref) == 1:
        refs = f"against {per_ref.index[0]}"
    else:
        refs = "against " + "; ".join(f"{ref} ({', '.join(labels)})" for ref, labels in per_ref.items())
    per_period = table.groupby("period", sort=False)["label"].unique()
    if len(per_period) == 1:
        periods = str(per_period.index[0])
    else:
        periods = "; ".join(f"{period} ({', '.join(labels)})" for period, labels in per_period.items())
    if by == "region":
        where = "regions " + ", ".join((p if short else parse_region(p).label) for p in parts)
    else:
        where = parse_region(str(table["region"].iloc[0])).label
    when = "seasons " + ", ".join(parts) if by == "season" else str(table["season"].iloc[0])
    counts = table.groupby("label", sort=False)["runs"].max()
    runs = table["model"].nunique()
    fewer = [f"{label} {n}" for label, n in counts.items() if n < runs]
    median = f"0 = the median over the {runs} runs shown"
    if fewer and not short:
        median += f" (over fewer where runs lack a variable: {', '.join(fewer)})"
    if short:  # a figure title: the panels name each variable's reference and period when they differ
        where = f"{len(parts)} regions" if by == "region" else where
        common = [refs, periods] if len(per_ref) == 1 and len(per_period) == 1 else []
        return " · ".join([f"{runs} runs", *common, where, when, median])
    return " · ".join([f"{runs} runs × {len(counts)} variables", refs, where, when, periods, median])


class OverviewView(ResultView):
    """Every run against every variable at a glance."""

    tab = "overview"
    title = "Overview of relative errors"
    uses = ("reference", "region", "season", "period")
    explanation = (
        "One panel per variable, one row per run; the runs are ranked, best first, by the median of "
        "their relative errors over the values they have (a run holding few variables is ranked on those). A dot's distance from the centre line is the run's RMSE "
        "relative to the median RMSE of the runs shown that hold the variable (Gleckler et al. 2008): "
        "left of the line (teal) a smaller error than the typical run, right (orange) a larger one; "
        "−0.2 means 20 % smaller; a dark dot is the median run itself. “By season” and “By region” give "
        "each run one sub-row per season or region. A triangle at the edge lies beyond the axis (hover "
        "for the value); “n/a”: the run does not provide the variable; ≈ within observational "
        "uncertainty of the best run of that variable (variables with several references; the rule is "
        "on the Scores page). Hover a dot for the RMSE, the median and the number of runs behind it."
    )

    def controls(self) -> list[pn.viewable.Viewable]:
        choice = pn.widgets.RadioButtonGroup(
            label="Overview by", options={label: key for key, label in OVERVIEW_BY.items()}, value=self.selection.overview_by,
            color="light", margin=(4, 10), css_classes=["gs-overview-by"],
        )

        def picked(event: Any) -> None:
            self.selection.overview_by = event.new

        def changed(event: Any) -> None:  # a link or another control set it
            choice.value = event.new

        choice.param.watch(picked, "value")
        self.selection.param.watch(changed, "overview_by")
        # what the core is doing while this overview is computed (empty once it is drawn)
        self._progress = pn.pane.HTML("", margin=(0, 10), sizing_mode="stretch_width", css_classes=["gs-overview-progress"])
        return [choice, self._progress]

    def key(self, request: Request) -> Any:
        return (request.reference, request.region, request.season, request.period, request.target_grid, request.overview_by)

    async def load(self, request: Request) -> dict[str, Any]:
        by = request.overview_by
        args = overview_args(request.reference, request.period, request.region, request.season, request.target_grid, by)
        results = self.results
        following = None if ("overview_ties",) + args in results.products else self._follow_progress()
        try:
            tidy = await results.fetch(("overview",) + args, results.overview, *args)
            ties = await results.fetch(("overview_ties",) + args, results.overview_ties, *args)
        finally:
            if following is not None:
                following()
        return {"table": overview_table(tidy, ties, by), "by": by}

    def _follow_progress(self):
        """Show what the core is doing in the progress line until the returned function is called
        (the server scores the overview in the background after it starts: :meth:`Results.warm`)."""
        doc, pane, results = self._doc, self._progress, self.results
        if doc is None or getattr(doc, "session_context", None) is None:
            return None

        def line() -> str:
            now = results.background  # names of variables come from files: escaped
            busy = f" Now {text_html(now)}." if now else ""
            return f'<div class="gs-hint"><b>Computing the overview of every variable…</b>{busy}</div>'

        def show() -> None:
            text = line()
            on_document(doc, lambda: setattr(pane, "object", text) if pane.object != text else None)

        show()
        callback = doc.add_periodic_callback(show, PROGRESS_MS)

        def stop() -> None:
            try:
                doc.remove_periodic_callback(callback)
            except (KeyError, ValueError):  # the session has ended
                pass
            on_document(doc, lambda: setattr(pane, "object", ""))

        return stop

    # ------------------------------------------------------------------ what is shown, in words
    def context(self, request: Request) -> str:
        table = self._last[0]["table"] if self._last is not None and self._last[1] == request else None
        if table is None or table.empty:
            return super().context(request)
        return describe(table, request)

    # ------------------------------------------------------------------ drawing
    def figure(self, data: dict[str, Any], request: Request) -> hv.Layout | None:
        table: pd.DataFrame = data["table"]
        if table.empty:
            return None
        by = data["by"]
        runs, parts, labels, y, centre, ylim, k, height, label_width, panel_width, cap, xlim = _layout(table, by)

        # the label panel: rank and run name at the band's centre, sub-row names on the right
        names = pd.DataFrame({"x": 0.02, "y": [centre[r] for r in runs], "text": [shorten(f"{i}. {r}") for i, r in enumerate(runs, 1)]})
        panel = hv.Labels(names, ["x", "y"], "text").opts(
            text_align="left", text_font_size="10pt", text_color=INK, text_font_style="bold", backend="bokeh",
        ).opts(horizontalalignment="left", size=9, color=INK, weight="bold", backend="matplotlib")
        if k > 1:
            subs = pd.DataFrame({"x": 0.98, "y": [y[(r, p)] for r in runs for p in parts], "text": [_part_label(by, p) for _ in runs for p in parts]})
            panel = panel * hv.Labels(subs, ["x", "y"], "text").opts(
                text_align="right", text_font_size="8pt", text_color="#4b5563", backend="bokeh",
            ).opts(horizontalalignment="right", size=7, color="#4b5563", backend="matplotlib")
        panel = panel.opts(
            xaxis=None, yaxis=None, xlim=(0, 1), ylim=ylim, frame_width=label_width, frame_height=height, title=" ", toolbar=None,
            show_frame=False, fontsize={"title": "10pt"}, backend="bokeh",
        ).opts(xaxis=None, yaxis=None, xlim=(0, 1), ylim=ylim, title=" ", aspect=1.4 * label_width / height, show_frame=False, backend="matplotlib")
        panels = [panel]

        bands = [(y[(r, parts[-1])] - 0.5, y[(r, parts[0])] + 0.5) for i, r in enumerate(runs) if i % 2 == 0]
        for index, label in enumerate(labels):
            block = table[table["label"] == label].copy()
            block["y"] = [y[(m, p)] for m, p in zip(block["model"], block["part"], strict=True)]
            value = block["rel_error"].to_numpy(dtype="float64")
            block["shown"] = np.clip(value, -cap, cap)
            block["colour"] = np.where(value < 0, BETTER, np.where(value > 0, WORSE, INK))
            block["where"] = [f"{parse_region(r).label}, {s}" for r, s in zip(block["region"], block["season"], strict=True)]
            block["rmse_text"] = [_number(v, u) for v, u in zip(block["rmse"], block["units"], strict=True)]
            block["median_text"] = [_number(v, u) for v, u in zip(block["median_rmse"], block["units"], strict=True)]
            block["rel_text"] = [_signed(v) for v in value]
            block["n_runs"] = block["runs"].astype(int)
            block["rank_text"] = [f"{int(rk)} of {n}" if np.isfinite(rk) else "—" for rk, n in zip(block["rank"], block["runs"], strict=True)]
            block = block.astype({c: object for c in ("model", "reference", "period", "label", "where", "rmse_text", "median_text", "rel_text", "rank_text", "colour")})
            finite = block[np.isfinite(value)]
            inside = finite[np.abs(finite["rel_error"]) <= cap]
            outside = finite[np.abs(finite["rel_error"]) > cap]
            hover = ["y", "model", "label", "where", "reference", "period", "rmse_text", "median_text", "n_runs", "rel_text", "rank_text", "colour"]
            tooltips = _TOOLTIPS
            # every layer's first dimensions are (shown, y): the axes are labelled after them
            # (HoloViews finds a dimension by its label too: every label differs)
            x, yd = hv.Dimension("shown", label="relative error", range=xlim), hv.Dimension("y", label="row")
            ends = [hv.Dimension("x_end", label="row end x"), hv.Dimension("y_end", label="row end y")]
            layers = []
            if bands:
                spans = pd.DataFrame([(xlim[0], low, xlim[1], high) for low, high in bands], columns=["shown", "y", "x_end", "y_end"])
                layers.append(hv.Rectangles(spans, [x, yd, *ends]).opts(color=_BAND, line_width=0, backend="bokeh")
                              .opts(color=_BAND, linewidth=0, backend="matplotlib"))
            zero = pd.DataFrame({"shown": [0.0], "y": [ylim[0]], "x_end": [0.0], "y_end": [ylim[1]]})
            layers.append(hv.Segments(zero, [x, yd, *ends]).opts(color=INK, line_width=1, backend="bokeh")
                          .opts(color=INK, linewidth=0.8, backend="matplotlib"))
            stems = finite.assign(x_end=finite["shown"], y_end=finite["y"], shown=0.0)
            layers.append(hv.Segments(stems, [x, yd, *ends], ["colour"]).opts(
                color="colour", line_width=2 if k > 1 else 3, backend="bokeh").opts(color="colour", linewidth=1.2, backend="matplotlib"))
            layers.append(hv.Scatter(inside, x, [yd, *hover[1:]]).opts(
                color="colour", size=7 if k > 1 else 10, line_color="white", tools=["hover"], hover_tooltips=tooltips, backend="bokeh",
            ).opts(color="colour", s=12 if k > 1 else 30, edgecolors="white", backend="matplotlib"))
            for side, turn in ((outside[outside["rel_error"] > 0], -90), (outside[outside["rel_error"] < 0], 90)):
                if side.empty:
                    continue
                # an arrow head pointing off the axis (HoloViews takes a constant angle in degrees)
                layers.append(hv.Scatter(side, x, [yd, *hover[1:]]).opts(
                    color="colour", marker="triangle", angle=turn, size=10 if k > 1 else 13, tools=["hover"], hover_tooltips=tooltips,
                    backend="bokeh",
                ).opts(color="colour", marker=">" if turn < 0 else "<", s=22 if k > 1 else 45, backend="matplotlib"))
            present = {(m, p) for m, p in zip(finite["model"], finite["part"], strict=True)}
            # a run without the variable: "n/a" at the left edge, off the centre line
            gaps = pd.DataFrame([(xlim[0] + 0.04 * cap, y[(r, p)], "n/a") for r in runs for p in parts if (r, p) not in present], columns=["shown", "y", "text"])
            if not gaps.empty:
                layers.append(hv.Labels(gaps, [x, yd], "text").opts(text_color=MUTED, text_font_size="8pt", text_align="left", backend="bokeh")
                              .opts(color=MUTED, size=6, horizontalalignment="left", backend="matplotlib"))
            tied = finite[finite["tied"].astype(bool)]
            if not tied.empty:
                marks = pd.DataFrame({"shown": tied["shown"] + np.where(tied["shown"] < 0, -0.16, 0.16) * cap, "y": tied["y"], "text": "≈"})
                layers.append(hv.Labels(marks, [x, yd], "text").opts(text_color=INK, text_font_size="11pt", backend="bokeh")
                              .opts(color=INK, size=9, backend="matplotlib"))
            title = plot_title(label)
            panels.append(hv.Overlay(layers).redim.range(y=ylim).opts(
                title=title, frame_width=panel_width, frame_height=height, yaxis=None, xlim=xlim, ylim=ylim, show_grid=False,
                toolbar=None, xticks=[-cap, 0, cap], xlabel="" if index else "relative error", fontsize={"title": "10pt", "xticks": "8pt", "xlabel": "8pt"},
                backend="bokeh",
            ).opts(title=title, yaxis=None, xlim=xlim, ylim=ylim, xticks=[-cap, 0, cap], aspect=panel_width / height, xlabel="", ylabel="", fontsize={"title": 8, "xticks": 6},
                   backend="matplotlib"))
        return hv.Layout(panels).cols(len(panels)).opts(shared_axes=False, toolbar=None, backend="bokeh").opts(
            shared_axes=False, sublabel_format="", hspace=0.08, fig_inches=(min(16.0, 1.6 + 0.95 * len(labels)), None), backend="matplotlib",
        )

    def export_figure(self, data: dict[str, Any], request: Request) -> hv.Layout | None:
        """The figure for matplotlib: the run and sub-row names as the first panel's tick labels
        (matplotlib does not keep a text-only panel on the variable panels' rows)."""
        figure = self.figure(data, request)
        if figure is None:
            return None
        table, by = data["table"], data["by"]
        runs = run_order(table)
        parts = _ordered_parts(table, by) if by in ("season", "region") else [""]
        y, centre, ylim = row_positions(runs, parts)
        # a row of text needs about 0.14 inch at 6 pt, the titles about an inch
        height = 0.14 * (ylim[1] - ylim[0]) + 1.3
        if len(parts) == 1:
            ticks = [(centre[r], f"{i}. {r}") for i, r in enumerate(runs, 1)]
        else:
            ticks = [(y[(r, p)], f"{i}. {r} · {_part_label(by, p)}" if j == 0 else _part_label(by, p))
                     for i, r in enumerate(runs, 1) for j, p in enumerate(parts)]
        labels = list(dict.fromkeys(table["label"]))
        first = table.drop_duplicates("label").set_index("label")
        several = table["reference"].nunique() > 1 or table["period"].nunique() > 1
        panels = []
        for index, panel in enumerate(list(figure)[1:]):
            label = labels[index]
            # a report figure stands alone: each variable's reference and period under its name when they differ
            title = f"{label}\n{first.loc[label, 'reference']}\n{first.loc[label, 'period']}" if several else label
            xlabel = "relative error" if index == 0 else ""
            panels.append(panel.opts(title=plot_title(title), xlabel=xlabel or " ", ylabel=" ", aspect="auto",
                                     fontsize={"title": 7, "xticks": 6, "xlabel": 7}, backend="matplotlib"))
        panels[0] = panels[0].opts(yaxis="left", yticks=ticks, fontsize={"title": 7, "xticks": 6, "xlabel": 7, "yticks": 6 if len(parts) > 1 else 8},
                                   backend="matplotlib")
        return hv.Layout(panels).cols(len(panels)).opts(
            title=plot_title(f"Relative RMSE error (Gleckler et al. 2008): {describe(table, request, short=True)}"),
            fontsize={"title": 8}, shared_axes=False, sublabel_format="", hspace=0.1, fig_inches=(min(16.0, 2.2 + 0.95 * len(panels)), height), backend="matplotlib",
        )

    def figure_name(self, request: Request) -> str:
        return super().figure_name(request).replace(f"_{request.variable}_", f"_by-{request.overview_by}_")

    def has_figure(self, data: dict[str, Any], request: Request) -> bool:
        return not data["table"].empty  # what :meth:`figure` draws (without building it again)

    def draw(self, data: dict[str, Any], request: Request) -> pn.viewable.Viewable:
        if data["table"].empty:
            return pn.pane.HTML('<div class="gs-empty">No relative errors for this selection.</div>')
        return pn.pane.Bokeh(bokeh_overview(data["table"], data["by"]), sizing_mode="stretch_width")


def _label_glyph(fig: Any, frame: pd.DataFrame, **looks: Any) -> None:
    """Texts at (x, y) of ``frame`` (centred vertically, as HoloViews' labels)."""
    fig.text("x", "y", text="text", source=ColumnDataSource({c: frame[c].tolist() for c in ("x", "y", "text")}),
             text_baseline="middle", **looks)


def _no_looks(fig: Any) -> None:
    """Nothing on the overview is drawn selected or muted: no glyph models for those looks."""
    for renderer in fig.renderers:
        renderer.nonselection_glyph = None
        renderer.muted_glyph = None


def bokeh_overview(table: pd.DataFrame, by: str) -> Any:
    """The figure of :meth:`OverviewView.figure` as plain Bokeh models, for the page.

    The same panels, rows, colours, marks and hover columns as the HoloViews figure (which
    the PNG/SVG export draws with matplotlib), built directly: HoloViews took 1.1-1.8 CPU-s of
    the server's event loop for one overview (ranges computed for each of about 40 layers)
    and made about 600 models for the page.
    """
    runs, parts, labels, y, centre, ylim, k, height, label_width, panel_width, cap, xlim = _layout(table, by)
    y_range = Range1d(*ylim)  # every panel's rows at the same heights
    formatter, ticker = BasicTickFormatter(), FixedTicker(ticks=[-cap, 0, cap])

    def panel(title: str, width: int, x_range: tuple[float, float], *, x_axis: bool = True) -> Any:
        # no y axis, no grid lines, no tools: no models for them
        fig = bokeh_figure(frame_width=width, frame_height=height, x_range=Range1d(*x_range), y_range=y_range, tools=[],
                           toolbar_location=None, y_axis_location=None, x_axis_location="below" if x_axis else None)
        fig.title.text = canvas_text(title)  # a name from a file: drawn as written
        fig.title.text_font_size = "10pt"
        fig.center = [r for r in fig.center if not isinstance(r, Grid)]
        return fig

    names = pd.DataFrame({"x": 0.02, "y": [centre[r] for r in runs], "text": [shorten(f"{i}. {r}") for i, r in enumerate(runs, 1)]})
    first = panel(" ", label_width, (0, 1), x_axis=False)
    first.outline_line_color = None
    _label_glyph(first, names, text_align="left", text_font_size="10pt", text_color=INK, text_font_style="bold")
    if k > 1:
        subs = pd.DataFrame({"x": 0.98, "y": [y[(r, p)] for r in runs for p in parts], "text": [_part_label(by, p) for _ in runs for p in parts]})
        _label_glyph(first, subs, text_align="right", text_font_size="8pt", text_color="#4b5563")
    _no_looks(first)
    figures = [first]

    bands = [(y[(r, parts[-1])] - 0.5, y[(r, parts[0])] + 0.5) for i, r in enumerate(runs) if i % 2 == 0]
    hover = ["model", "label", "where", "reference", "period", "rmse_text", "median_text", "n_runs", "rel_text", "rank_text", "colour"]
    for index, label in enumerate(labels):
        block = table[table["label"] == label]
        value = block["rel_error"].to_numpy(dtype="float64")
        finite = np.isfinite(value)
        shown = np.clip(value, -cap, cap)
        rows = pd.DataFrame({
            "shown": shown, "y": [y[(m, p)] for m, p in zip(block["model"], block["part"], strict=True)],
            "model": block["model"].astype(str), "label": block["label"].astype(str),
            "where": [f"{parse_region(r).label}, {s}" for r, s in zip(block["region"], block["season"], strict=True)],
            "reference": block["reference"].astype(str), "period": block["period"].astype(str),
            "rmse_text": [_number(v, u) for v, u in zip(block["rmse"], block["units"], strict=True)],
            "median_text": [_number(v, u) for v, u in zip(block["median_rmse"], block["units"], strict=True)],
            "n_runs": block["runs"].astype(int).to_numpy(),
            "rel_text": [_signed(v) for v in value],
            "rank_text": [f"{int(rk)} of {n}" if np.isfinite(rk) else "—" for rk, n in zip(block["rank"], block["runs"], strict=True)],
            "colour": np.where(value < 0, BETTER, np.where(value > 0, WORSE, INK)),
            "rel_error": value, "tied": block["tied"].astype(bool).to_numpy(), "part": block["part"].astype(str),
        })[finite]
        fig = panel(label, panel_width, xlim)
        fig.xaxis.ticker, fig.xaxis.formatter = ticker, formatter
        fig.xaxis.major_label_text_font_size = "8pt"
        fig.xaxis.axis_label = "" if index else "relative error"
        fig.xaxis.axis_label_text_font_size = "8pt"
        if bands:
            fig.quad(left=xlim[0], right=xlim[1], bottom=[b[0] for b in bands], top=[b[1] for b in bands], color=_BAND, line_width=0)
        fig.segment(x0=[0.0], y0=[ylim[0]], x1=[0.0], y1=[ylim[1]], color=INK, line_width=1)
        stems = ColumnDataSource({"x0": np.zeros(len(rows)), "y": rows["y"].to_numpy(), "x1": rows["shown"].to_numpy(), "colour": rows["colour"].tolist()})
        fig.segment(x0="x0", y0="y", x1="x1", y1="y", source=stems, color="colour", line_width=2 if k > 1 else 3)
        dots = []
        inside, outside = rows[np.abs(rows["rel_error"]) <= cap], rows[np.abs(rows["rel_error"]) > cap]
        columns = ["shown", "y", *hover]
        dots.append(fig.scatter("shown", "y", source=ColumnDataSource({c: inside[c].tolist() for c in columns}),
                                color="colour", size=7 if k > 1 else 10, line_color="white"))
        for side, turn in ((outside[outside["rel_error"] > 0], -90), (outside[outside["rel_error"] < 0], 90)):
            if side.empty:
                continue
            # an arrow head pointing off the axis
            dots.append(fig.scatter("shown", "y", source=ColumnDataSource({c: side[c].tolist() for c in columns}), color="colour",
                                    marker="triangle", angle=turn, angle_units="deg", size=10 if k > 1 else 13))
        present = set(zip(rows["model"], rows["part"], strict=True))
        # a run without the variable: "n/a" at the left edge, off the centre line
        gaps = pd.DataFrame([(xlim[0] + 0.04 * cap, y[(r, p)], "n/a") for r in runs for p in parts if (r, p) not in present], columns=["x", "y", "text"])
        if not gaps.empty:
            _label_glyph(fig, gaps, text_color=MUTED, text_font_size="8pt", text_align="left")
        tied = rows[rows["tied"]]
        if not tied.empty:
            marks = pd.DataFrame({"x": tied["shown"] + np.where(tied["shown"] < 0, -0.16, 0.16) * cap, "y": tied["y"], "text": "≈"})
            _label_glyph(fig, marks, text_color=INK, text_font_size="11pt", text_align="center")
        # Tooltip labels are set as text by Bokeh; the value templates are our own placeholders, whose values Bokeh escapes.
        fig.add_tools(HoverTool(renderers=dots, tooltips=_TOOLTIPS))
        _no_looks(fig)
        figures.append(fig)
    return bokeh_row(figures)
