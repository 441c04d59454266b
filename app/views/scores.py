"""The score table of the selected runs, with the best value per column marked.

Numbers come from ``Comparison.scores``; the downloads are the core's exporters
(``evaluation.export.table_bytes``) with the comparison's provenance, built on the server
from the whole table (Tabulator's own download would export only what the page holds).
"""

from __future__ import annotations

import io
import math
from typing import Any

import numpy as np
import pandas as pd
import panel as pn
import param
from bokeh.models.widgets.tables import HTMLTemplateFormatter, NumberFormatter

from evaluation.bootstrap import BEST_RULE, GUARDED_BEST
from evaluation.export import (
    METRIC_ORDER,
    provenance_bytes,
    provenance_for,
    sidecar_path,
    table_bytes,
    wide_table,
)
from evaluation.metrics import METRICS
from evaluation.regions import parse_region, region_label
from evaluation.relative import relative_error_table, with_relative_errors
from evaluation.uncertainty import RULE, run_pairs, tied_with

from ..state import SORT_KEYS, Request, parse_sort
from .base import ResultView, safe_filename, text_html, text_tooltip

__all__ = ["ScoresView", "best_rows", "number_format", "provenance_download", "within_best"]

#: Table downloads offered: exporter format -> button label.
DOWNLOADS = {"csv": "CSV", "xlsx": "Excel", "md": "Markdown", "tex": "LaTeX"}
#: Compact numeric table: wrapped header titles, tabular figures.
#: A best value (bold in its cell, see :func:`_formatters`): the whole cell tinted; a value within
#: observational uncertainty of the best (italic): underlined, and named in the "≈ best" column.
TABLE_CSS = """
:host .tabulator-col-title { white-space: normal !important; text-overflow: clip !important; line-height: 1.2;
  padding-right: 14px !important; }
:host .tabulator-cell { font-variant-numeric: tabular-nums; font-size: 13px; }
:host .tabulator-col { font-size: 12px; }
:host .tabulator-cell:has(> div[style*="font-weight: bold"]) { background-color: #d7f0ec; color: #0b4f4c; }
:host .tabulator-cell > div[style*="font-weight: bold"] { font-weight: 700 !important; }
:host .tabulator-cell > div[style*="font-style: italic"] { text-decoration: underline dotted; }
"""
#: The hidden column that says how a metric's cells are marked: its values are the cells' font
#: style ("bold": best, "italic": within observational uncertainty of the best, "normal").
MARK = "{} mark"
#: The text column that names, per run, the metrics it ties with the best within observational uncertainty.
WITHIN_COLUMN = "≈ best (obs. uncertainty)"


def best_rows(values: pd.Series, metric: str) -> list[bool]:
    """Which entries of a metric column are best, by the registry's rule.

    Notes
    -----
    ``high``/``low`` take the largest/smallest value, ``zero`` the smallest magnitude
    (bias), ``one`` the value closest to one (standard-deviation and variability ratios).
    Metrics without a better direction mark nothing; NaN is never best; ties are all
    marked.
    """
    rule = METRICS[metric].best if metric in METRICS else None
    v = pd.to_numeric(values, errors="coerce").to_numpy(dtype="float64")
    if rule is None or not np.isfinite(v).any():
        return [False] * len(v)
    score = {"high": -v, "low": v, "zero": np.abs(v), "one": np.abs(v - 1.0)}[rule]
    best = np.nanmin(score)
    return [bool(np.isfinite(s) and np.isclose(s, best, rtol=1e-12, atol=0.0)) for s in score]


def number_format(values: pd.Series, metric: str) -> str:
    """A numbro format with sensible digits for a column (p-values: three decimals).

    Notes
    -----
    Four significant digits of the column's largest magnitude; scientific notation below
    0.001 (fluxes in kg m-2 s-1).  NaN-only columns get three decimals.
    """
    if metric.endswith("pvalue"):
        return "0.000"
    v = pd.to_numeric(values, errors="coerce").to_numpy(dtype="float64")
    finite = np.abs(v[np.isfinite(v)])
    top = float(finite.max()) if finite.size else 0.0
    if top == 0.0:
        return "0.000"
    if top < 1e-3:
        return "0.000e+0"
    decimals = min(4, max(0, 3 - math.floor(math.log10(top))))
    return "0,0" if decimals == 0 else "0,0." + "0" * decimals


#: p-values as the report tables write them: three decimals, "< 0.001" below (a p-value is
#: never exactly zero); the cell keeps the number, so sorting stays numeric.
P_VALUE_FORMAT = HTMLTemplateFormatter(
    template='<div style="text-align:right"><%= (value == null || isNaN(value)) ? "–" : '
    '(value < 0.001 ? "&lt; 0.001" : Number(value).toFixed(3)) %></div>'
)


#: The table is shown in two parts so that every column stays readable without scrolling.
GROUPS: dict[str, tuple[str, ...]] = {
    "Climatology": ("mean", "ref_mean", "bias", "rmse", "crmse", "corr", "std_ratio", "taylor_skill", "rel_error"),
    "Trends and variability": ("trend", "ref_trend", "trend_pvalue", "ref_trend_pvalue", "iav_ratio"),
    "Significance": ("bias_signif_area", "rmse_diff_lo", "rmse_diff_hi", "abs_bias_diff_lo", "abs_bias_diff_hi"),
}


def within_best(shown: pd.DataFrame, pairs: pd.DataFrame, metrics: list[str]) -> dict[str, list[bool]]:
    """Per metric, which runs are not best but within observational uncertainty of a best run.

    ``pairs`` is :func:`evaluation.uncertainty.run_pairs` of the same runs (one region,
    season and period); an undecided pair (one reference, NaN) marks nothing.
    """
    marks: dict[str, list[bool]] = {}
    for m in metrics:
        best = best_rows(shown[m], m)
        close = tied_with(pairs[pairs["metric"] == m], set(shown.loc[best, "Run"]) if any(best) else set())
        marks[m] = [run in close for run in shown["Run"]]
    return marks


def table_parts(shown: pd.DataFrame, units: dict[str, str], within: dict[str, list[bool]] | None = None,
                confirmed: dict[str, list[bool]] | None = None) -> dict[str, Any]:
    """What one table of runs × metrics shows, before any widget is made: the frame, the column
    titles, each metric's number format, the header tooltips and the marked cells (the best
    values); with ``within`` (:func:`within_best`), the values tied with the best within
    observational uncertainty are underlined and named in a text column; with ``confirmed``
    (metric -> runs whose bootstrap interval excludes zero, :data:`evaluation.bootstrap.BEST_RULE`),
    a metric it names marks only those runs."""
    metrics = list(units)
    marked = [m for m in metrics if m in METRICS and METRICS[m].best is not None]
    if not marked:
        within = None  # no metric of this table has a best value that a run could tie with
    # the text column is in every table of a comparison with several references, "–" for a run
    # that ties in none of its metrics: every region's table has the same columns shown, and a
    # change of region changes only the values of the tables on the page (showing or hiding a
    # column made Tabulator redraw the whole table in the browser, 60-200 ms a table)
    if within is not None:
        shown = shown.copy()
        shown[WITHIN_COLUMN] = [
            ", ".join(METRICS[m].label if m in METRICS else m for m in metrics if within.get(m, [False] * len(shown))[i]) or "–"
            for i in range(len(shown))
        ]
    titles = {"Run": "Run"}
    formats: dict[str, str | None] = {}
    for m in metrics:
        label = METRICS[m].label if m in METRICS else m
        unit = units[m]
        # Tabulator writes titles as HTML; units come from files, so escape them.
        titles[m] = text_html(label) + (f"<br><small>{text_html(unit)}</small>" if unit and unit != "1" else "")
        formats[m] = None if m.endswith("pvalue") else number_format(shown[m], m)
    tooltips = {m: METRICS[m].description for m in metrics if m in METRICS}
    if within is not None:
        tooltips[WITHIN_COLUMN] = "Metrics in which this run is within observational uncertainty of the best run"
    marks = {m: best_rows(shown[m], m) for m in metrics}
    for m, allowed in (confirmed or {}).items():
        if m in marks:
            marks[m] = [b and a for b, a in zip(marks[m], allowed, strict=True)]
    tied = {m: (within or {}).get(m, [False] * len(shown)) for m in metrics}
    # The marks travel with the values, one hidden text column per metric that has a best value,
    # read by the column's number format as the cells' font style (and by TABLE_CSS): a change of
    # region sends the new columns only.  Marked through the table's cell styles, every change
    # of them made Tabulator redraw each whole table in the browser, a third of the change.
    if marked:
        shown = shown.copy() if within is None else shown
        for m in marked:
            shown[MARK.format(m)] = ["bold" if b else "italic" if t else "normal" for b, t in zip(marks[m], tied[m], strict=True)]
    hidden = [MARK.format(m) for m in marked]
    return {"frame": shown, "metrics": metrics, "titles": titles, "formats": formats, "tooltips": tooltips,
            "within": within is not None, "hidden": hidden, "marked": marked, "best": marks, "tied": tied}


def _formatters(parts: dict[str, Any]) -> dict[str, Any]:
    marked = set(parts.get("marked", ()))
    formatters: dict[str, Any] = {
        m: P_VALUE_FORMAT if fmt is None else NumberFormatter(format=fmt, nan_format="–", text_align="right",
                                                              **({"font_style": MARK.format(m)} if m in marked else {}))
        for m, fmt in parts["formats"].items()
    }
    if parts["within"]:
        formatters[WITHIN_COLUMN] = {"type": "textarea"}  # wraps the list of metric names
    return formatters


def _widget(parts: dict[str, Any]) -> pn.widgets.Tabulator:
    widget = pn.widgets.Tabulator(
        parts["frame"],
        show_index=False,
        disabled=True,
        selectable=False,
        titles=parts["titles"],
        formatters=_formatters(parts),
        header_tooltips=parts["tooltips"],
        frozen_columns=["Run"],
        layout="fit_columns",
        sizing_mode="stretch_width",
        theme="simple",
        widths={"Run": 140, **({WITHIN_COLUMN: 190} if parts["within"] else {})},
        hidden_columns=parts["hidden"],
        stylesheets=[TABLE_CSS],
    )
    return widget


class _Drawn:
    """The score tables on the page and what the next drawing of the same shape changes in place."""

    def __init__(self, shape: tuple, column: pn.Column, tables: list[tuple[pn.widgets.Tabulator, dict[str, str | None]]],
                 hints: dict[str, pn.pane.HTML], buttons: list[pn.widgets.FileDownload]) -> None:
        self.shape, self.column, self.tables, self.hints, self.buttons = shape, column, tables, hints, buttons

    def on_page(self, body: pn.Column, doc: Any) -> bool:
        """Whether these tables are what the view shows, each with a model in the session's document
        (a model left out of the document would take new values that never reach the page)."""
        return (doc is not None and body.objects == [self.column]
                and all(any(m.document is doc for m, _ in widget._models.values()) for widget, _ in self.tables))

    def refill(self, specs: list[dict[str, Any]]) -> None:
        """Every table showing the values of ``specs`` (same columns, titles and order rule): Panel
        sends the new values (their marks in hidden columns) of the table models already on the page,
        and a column's number format only where it changed."""
        for i, ((widget, formats), parts) in enumerate(zip(self.tables, specs, strict=True)):
            if parts["formats"] != formats:
                _reformat(widget, parts)
                self.tables[i] = (widget, dict(parts["formats"]))
            if parts["hidden"] != widget.hidden_columns:
                widget.hidden_columns = parts["hidden"]
            widget.value = parts["frame"]


def _reformat(widget: pn.widgets.Tabulator, parts: dict[str, Any]) -> None:
    """New number formats of the columns of a table on the page, as one property each.

    Panel answers new ``formatters`` with new column models, and Tabulator in the browser then
    builds its columns anew (a third of a region change); its cells read their formatter's
    format whenever they are drawn, so the format of the column models already on the page is
    changed instead, before the new values arrive.  The widget keeps the same formatters for
    any model it makes later (without rebuilding the columns of the current one; changed in
    place instead, Panel sent one table's columns anew)."""
    for model, _ in widget._models.values():  # Panel's models of this widget, one per page showing it
        for column in model.columns:
            fmt = parts["formats"].get(column.field)
            if fmt is not None and isinstance(column.formatter, NumberFormatter) and column.formatter.format != fmt:
                column.formatter.format = fmt
    with param.parameterized.discard_events(widget):
        widget.formatters = _formatters(parts)


def sorted_runs(shown: pd.DataFrame, sort: str) -> tuple[pd.DataFrame, dict[str, str] | None]:
    """The shown table in the order of a ``sort`` URL value (:func:`app.state.parse_sort`), and
    the Tabulator sorter that shows it; the collection's order and ``None`` for an empty value
    or a column the table lacks.  Missing values go last in either direction."""
    parsed = parse_sort(sort)
    if parsed is None:
        return shown, None
    key, descending = parsed
    column = "Run" if key == "model" else key
    if column not in shown.columns:
        return shown, None
    ordered = shown.sort_values(column, ascending=not descending, na_position="last", kind="stable").reset_index(drop=True)
    return ordered, {"field": column, "dir": "desc" if descending else "asc"}


def sort_value(sorters: list[dict[str, Any]]) -> str | None:
    """The ``sort`` URL value of a table's sorters (its first): ``""`` for none, ``None`` for a
    column that is not a sort key (the text column of ties)."""
    if not sorters:
        return ""
    field, direction = str(sorters[0].get("field", "")), str(sorters[0].get("dir", "asc"))
    key = "model" if field == "Run" else field
    if key not in SORT_KEYS:
        return None
    return ("-" if direction == "desc" else "") + key


class ScoresView(ResultView):
    """Sortable scores of each selected run for the region, season and period."""

    tab = "scores"
    title = "Scores"
    #: The tables on the page, changed in place by a drawing of the same shape.
    _kept: _Drawn | None = None
    explanation = (
        "Area-weighted statistics of each run against the reference for the selected region, "
        "season and period. The best value of each column is highlighted (bias: nearest zero; "
        "ratios: nearest one; bias, RMSE and relative error only where the bootstrap interval excludes zero, rule below). With several references, values within observational uncertainty of "
        "the best are underlined and named in the last column (the rule is stated below the table's "
        "context line). Click a header to sort (the order goes into the link); hover a header for the definition."
    )

    def key(self, request: Request) -> Any:
        return (request.variable, request.level, request.reference, request.models, request.region, request.season, request.period,
                request.target_grid, request.sort)

    @staticmethod
    def _view_key(request: Request) -> tuple:
        """Where the whole of what is drawn is kept with the products (of this generation of the
        files): a selection shown before is drawn again without computing."""
        return ("scores_view", request.reference, request.variable, request.period, request.region, request.season,
                request.level, request.target_grid, request.models)

    def ready(self, request: Request) -> dict[str, Any] | None:
        return self.results.products.get(self._view_key(request), None)

    async def load(self, request: Request) -> dict[str, Any]:
        results = self.results
        view_key = self._view_key(request)
        products = results.products
        kept = products.get(view_key, None)
        if kept is not None:
            return kept
        args = (request.reference, request.variable, request.period, request.region, request.season, request.level, request.target_grid)
        tidy = await results.fetch(("scores",) + args, results.scores, *args)
        record = await results.fetch(("provenance",) + args, results.provenance, *args)
        largs = (request.reference, request.variable, request.period, request.level, request.target_grid)
        left = await results.fetch(("left_out",) + largs, results.left_out, *largs)
        # a partial table: sources with no rows for this season, with the reason (plain text)
        left = (*left, *(f"{o['source']} {o['season']}: {o['reason']}" for o in record.get("omitted", []) if o["season"] == request.season))
        alternatives = await self.alternatives(request)
        # the selected runs against every reference, and the other references against the selected one
        every = tidy[tidy["model"].isin([*request.models, *alternatives])].reset_index(drop=True)
        # relative error: against the median of the runs shown (the ticked ones), as on the command line
        every = with_relative_errors(every, request.models)
        mine = every[(every["reference"] == request.reference) & every["model"].isin(request.models)].reset_index(drop=True)
        pairs = run_pairs(every[every["model"].isin(request.models)], primary=request.reference) if alternatives else None
        runs = relative_error_table(every[every["reference"] == request.reference], request.models)["runs"].max()
        data = {"tidy": mine, "every": every, "pairs": pairs, "alternatives": alternatives, "provenance": record, "left_out": left,
                "runs": int(runs) if pd.notna(runs) else 0}
        if not mine.empty:
            # the shown table and its ties, kept with the rest: a change back to this selection only draws
            shown, units = data["table"] = self.table(mine)
            if pairs is not None:
                flags = within_best(shown, pairs, list(units))
                data["ties"] = {m: {run for run, f in zip(shown["Run"], flags[m], strict=True) if f} for m in units}
        products.put(view_key, data)
        return data

    def table(self, tidy: pd.DataFrame) -> tuple[pd.DataFrame, dict[str, str]]:
        """The shown frame (one row per run, one column per metric) and each column's units."""
        wide = wide_table(tidy)
        metrics = [m for m in METRIC_ORDER if m in wide.columns]
        shown = wide[["model", *metrics]].rename(columns={"model": "Run"})
        units = tidy.drop_duplicates("metric").set_index("metric")["units"].to_dict()
        return shown, {m: str(units.get(m, "")) for m in metrics}

    def _tables(self, data: dict[str, Any], request: Request) -> tuple[list[tuple[str | None, dict[str, Any]]], dict[str, str] | None,
                                                                     dict[str, str], tuple]:
        """What :meth:`draw` shows of ``data`` in the order of ``request.sort``: each table's parts
        (:func:`table_parts`) under its heading, the sorter, the hints and the shape of the whole."""
        tidy: pd.DataFrame = data["tidy"]
        shown, units = data["table"] if "table" in data else self.table(tidy)
        shown, sorter = sorted_runs(shown, request.sort)
        # "best" only where the bootstrap interval against the best other run excludes zero
        confirmed = {m: [bool(v < 0) for v in pd.to_numeric(shown[bound], errors="coerce")]
                     for m, bound in GUARDED_BEST.items() if bound in shown.columns}
        ties = data.get("ties")
        if ties is None and data.get("pairs") is not None:
            flags = within_best(shown, data["pairs"], list(units))
            ties = {m: {run for run, f in zip(shown["Run"], flags[m], strict=True) if f} for m in units}
        specs: list[tuple[str | None, dict[str, Any]]] = []
        for heading, group in GROUPS.items():
            metrics = [m for m in group if m in units]
            if metrics:
                within = {m: [run in ties[m] for run in shown["Run"]] for m in metrics} if ties is not None else None
                specs.append((heading, table_parts(shown[["Run", *metrics]], {m: units[m] for m in metrics}, within, confirmed)))
        others = [m for m in units if not any(m in g for g in GROUPS.values())]
        if others:
            specs.append((None, table_parts(shown[["Run", *others]], {m: units[m] for m in others})))
        region = parse_region(request.region)
        hints = {
            "context": (f"Region {region_label(region)}: {region.definition}. Relative error compares each run's RMSE with the "
                        f"median over the {data['runs']} runs shown (Gleckler et al. 2008); ticking a run on or off changes it."),
            "best": BEST_RULE if confirmed else "",
            "obs": (f"Observational uncertainty, from the references {', '.join([request.reference, *data['alternatives']])}: "
                    f"underlined values, named in the column '{WITHIN_COLUMN}', are within observational uncertainty of the "
                    f"best value. {RULE} The downloads hold every run against every reference.") if data.get("alternatives") else "",
            "left": "Left out of this comparison: " + "; ".join(data["left_out"]) if data["left_out"] else "",
        }
        shape = (tuple((heading, tuple(parts["frame"].columns), tuple(parts["titles"].values())) for heading, parts in specs),
                 None if sorter is None else tuple(sorted(sorter.items())), tuple(k for k, v in hints.items() if v))
        return specs, sorter, hints, shape

    def draw(self, data: dict[str, Any], request: Request) -> pn.viewable.Viewable:
        tidy: pd.DataFrame = data["tidy"]
        if tidy.empty:
            self._kept = None
            return pn.pane.HTML('<div class="gs-empty">No scores for this selection.</div>')
        # the tables' frames, formats and marks, made once per shown selection and order of runs and
        # kept with its numbers: a change back to a region seen before does no pandas work
        drawn = data.setdefault("drawn", {})
        if request.sort not in drawn:
            drawn[request.sort] = self._tables(data, request)
        specs, sorter, hints, shape = drawn[request.sort]
        kept = self._kept
        if kept is not None and kept.shape == shape and kept.on_page(self._body, self._doc):
            # the same tables with other values (another region, say): changed in place, so that the
            # browser redraws rows of the tables it has rather than building new ones
            kept.refill([parts for _, parts in specs])
            for name, text in hints.items():
                if text:
                    kept.hints[name].object = self._hint_html(name, text)
            self._point_downloads(kept.buttons, data, request)
            return kept.column
        panes = {name: pn.pane.HTML(self._hint_html(name, text), margin=(0, 10, 6, 10)) for name, text in hints.items() if text}
        parts: list[Any] = list(panes.values())
        tables = []
        for heading, spec in specs:
            if heading is not None:
                parts.append(pn.pane.HTML(f'<div class="gs-section-title">{text_html(heading)}</div>', margin=(6, 10, 2, 10)))
            widget = _widget(spec)
            parts.append(self._sortable(widget, sorter))
            tables.append((widget, dict(spec["formats"])))
        buttons = self._download_buttons()
        self._point_downloads(buttons, data, request)
        note = pn.pane.HTML('<span class="gs-hint">Download the table:</span>', margin=(12, 4, 0, 10))
        column = pn.Column(*parts, pn.Row(note, *buttons), sizing_mode="stretch_width")
        self._kept = _Drawn(shape, column, tables, panes, buttons)
        return column

    @staticmethod
    def _hint_html(name: str, text: str) -> str:
        css = {"context": "gs-hint", "best": "gs-hint gs-best-rule", "obs": "gs-hint gs-obs-rule", "left": "gs-notice"}[name]
        return f'<div class="{css}">{text_html(text)}</div>'

    def _show(self, *args: Any, **kwargs: Any) -> None:
        # every change of a drawing in one message: the tables change together in the browser
        # (sent one by one, each table's new rows were drawn in turn)
        with pn.io.hold(self._doc):
            super()._show(*args, **kwargs)

    def _sortable(self, widget: pn.widgets.Tabulator, sorter: dict[str, str] | None) -> pn.widgets.Tabulator:
        """``widget`` showing the link's sort on its column, and a header click put into the link
        (URL ``sort``): every table of the view is then drawn in that order of runs."""
        if sorter is not None and sorter["field"] in widget.value.columns:
            widget.sorters = [sorter]
        sel = self.selection

        def picked(event: Any) -> None:
            value = sort_value(event.new)
            if value is not None and value != sel.sort:
                sel.sort = value

        widget.param.watch(picked, "sorters")
        return widget

    @staticmethod
    def _download_buttons() -> list[pn.widgets.FileDownload]:
        buttons = [
            pn.widgets.FileDownload(
                filename=f"scores.{fmt}",
                label=label,
                color="light",
                width=120,
                height=34,
                description=text_tooltip(f"Download the table as {label} with its provenance"),
                css_classes=[f"gs-download-{fmt}"],
            )
            for fmt, label in DOWNLOADS.items()
        ]
        # the CSV's provenance as the command line writes it beside its CSV (same name, same content)
        return [*buttons, provenance_download({}, "scores.csv")]

    def _point_downloads(self, buttons: list[pn.widgets.FileDownload], data: dict[str, Any], request: Request) -> None:
        """The download buttons made for ``data`` (their callbacks and file names)."""
        tidy = data.get("every", data["tidy"])

        def record() -> dict:
            """The provenance of the files of the sources in the downloaded table only (the comparison
            holds every run of the variable); made when a download asks, not at each drawing."""
            return provenance_for(data["provenance"], {request.reference, *tidy["model"], *tidy["reference"]})

        base = safe_filename("scores", request.variable, request.reference, request.region, request.season, request.period)
        results = self.results
        for fmt, button in zip(DOWNLOADS, buttons, strict=False):

            async def make(fmt: str = fmt) -> io.BytesIO:
                payload = await results.run(lambda: table_bytes(tidy, fmt, provenance=record()))
                return io.BytesIO(payload)

            button.param.update(callback=make, filename=f"{base}.{fmt}")
        buttons[-1].param.update(callback=lambda: io.BytesIO(provenance_bytes(record())),
                                 filename=sidecar_path(f"{base}.csv").name)


def provenance_download(record: dict, csv_name: str) -> pn.widgets.FileDownload:
    """The provenance of a CSV download, named and written as ``gridscore score`` writes it
    beside a CSV file (``<name>.provenance.json``)."""
    return pn.widgets.FileDownload(
        callback=lambda: io.BytesIO(provenance_bytes(record)),
        filename=sidecar_path(csv_name).name,
        label="Provenance",
        color="light",
        width=120,
        height=34,
        description=text_tooltip("Download the provenance of the CSV table (JSON: files, software, choices)"),
        css_classes=["gs-download-provenance"],
    )
