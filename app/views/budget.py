"""Energy budget at the top of the atmosphere for the selected runs.

The numbers (net flux and its drift, planetary albedo, effective emissivity, the
zero-dimensional equilibrium temperature) come from ``evaluation.budget``; the view shows
them beside published estimates and draws each run's yearly net flux with its trend.
"""

from __future__ import annotations

import io
from typing import Any

import holoviews as hv
import numpy as np
import pandas as pd
import panel as pn
import xarray as xr
from bokeh.models.widgets.tables import NumberFormatter

from evaluation import budget
from evaluation.errors import InputError
from evaluation.export import csv_bytes
from evaluation.trends import ols_trend

from ..state import Request
from .base import ResultView, figure_pane, safe_filename, text_html, text_tooltip
from .lines import curve, line_figure
from .results import Results
from .scores import TABLE_CSS, provenance_download

__all__ = ["BudgetView", "budget_available", "budget_runs"]

_LABELS = {
    "toa_net": "Net TOA flux",
    "toa_net_drift": "Drift of net flux",
    "albedo": "Planetary albedo",
    "emissivity": "Effective emissivity",
    "solar_constant": "Solar constant",
    "t_surface": "Surface temperature",
    "t_equilibrium": "Equilibrium temperature",
    "t_difference": "Equilibrium minus surface",
}


#: A handful of rows needs no sorting; without the sort arrows the header titles have room.
_NO_SORT = {"columnDefaults": {"headerSort": False}}


def budget_runs(results: Results, names: tuple[str, ...] | list[str]) -> list[str]:
    """The runs among ``names`` holding all four budget fields (by name or standard name)."""
    return [n for n in names if all(results.holds(n, f.name, f.standard_name) for f in budget.BUDGET_FIELDS)]


def budget_available(results: Results) -> bool:
    return bool(budget_runs(results, [s.name for s in results.collection.models]))


def _provenance(results: Results, table: pd.DataFrame) -> dict:
    return budget.budget_provenance([results.source(n) for n in dict.fromkeys(table["model"])], table)


def _table(results: Results, names: tuple[str, ...]) -> tuple[pd.DataFrame, dict[str, str]]:
    """The budget of every source that has its four fields, over one period, and why the
    others have no numbers (source name -> reason).

    The period is the core's default rule over the sources with numbers (1991-2020 when
    all cover it, else their common years); where they share no years, each source gets
    its own default period (the table's ``period`` column says which).
    """
    reasons: dict[str, str] = {}
    able = []
    for name in names:
        missing = [f.name for f in budget.BUDGET_FIELDS if not results.holds(name, f.name, f.standard_name)]
        if missing:
            reasons[name] = f"no {', '.join(missing)} in its files (the budget needs rsdt, rsut, rlut and tas)"
        else:
            able.append(name)
    try:
        table = budget.budget_table([results.source(n) for n in able], period=None) if able else None
    except InputError:
        tables = []
        for name in able:
            try:
                tables.append(budget.budget_table(results.source(name), period=None))
            except InputError as error:
                reasons[name] = error.problem
        table = pd.concat(tables, ignore_index=True) if tables else None
    if table is None:
        table = pd.DataFrame(columns=budget.BUDGET_COLUMNS)
    return table, reasons


def _series(results: Results, name: str, period: str) -> xr.DataArray:
    return budget.budget_series(results.source(name), period=period)


class BudgetView(ResultView):
    """Is each run's energy budget closed, and does it drift?"""

    tab = "budget"
    title = "Energy budget at the top of the atmosphere"
    uses = ()
    explanation = (
        "Global annual means of every source of the collection (references first): net downward "
        "flux (incoming minus reflected shortwave minus outgoing longwave; near +0.7 W m-2 is "
        "observed), its drift, planetary albedo, effective emissivity and the equilibrium "
        "temperature of a zero-dimensional Stefan-Boltzmann balance. A source without the four "
        "fields is listed with the reason. The variable, runs and period chosen in the sidebar do "
        "not apply here: the period is the years the sources with numbers share. Below: published "
        "estimates and each source's yearly net flux."
    )

    def key(self, request: Request) -> Any:
        return ("budget",)  # the whole collection, whatever the sidebar shows

    def context(self, request: Request) -> str:
        period = self._last[0]["period"] if self._last else ""
        return f"Every source of the collection · {period}" if period else "Every source of the collection"

    async def load(self, request: Request) -> dict[str, Any]:
        results = self.results
        collection = results.collection
        names = tuple(s.name for s in (*collection.references, *collection.models))
        table, reasons = await results.fetch(("budget", names), _table, results, names)
        series = {}
        for name in dict.fromkeys(table["model"]):
            period = str(table.loc[table["model"] == name, "period"].iloc[0])
            series[name] = await results.fetch(("budget-series", name, period), _series, results, name, period)
        periods = list(dict.fromkeys(table["period"].map(str)))
        note = "" if len(periods) <= 1 else "The sources with numbers share no years; each is shown over its own period."
        references = {s.name for s in collection.references}
        # the provenance the command line writes beside its CSV (the files of the four fields)
        record = await results.fetch(("budget-provenance", names), _provenance, results, table)
        return {"table": table, "reasons": reasons, "note": note, "series": series, "names": names,
                "references": references, "period": ", ".join(periods), "provenance": record}

    def figure(self, data: dict[str, Any], request: Request) -> hv.Overlay:
        xdim = hv.Dimension("year", label="Year")
        ydim = hv.Dimension("toa_net", label="Net downward TOA flux", unit="W m-2")
        curves = []
        for name, da in data["series"].items():
            years = da["year"].values.astype("float64")
            colour = self.results.colour(name)
            fit = ols_trend(da)
            label = f"{name} ({fit.slope * 100:+.2f} W m-2/century)" if np.isfinite(fit.slope) else name
            curves.append(curve(years, da.values, label=label, colour=colour, xdim=xdim, ydim=ydim))
            if np.isfinite(fit.slope):
                curves.append(curve(years, fit.intercept + fit.slope * years, label=label, colour=colour, xdim=xdim, ydim=ydim, dash="dashed"))
        zero = hv.HLine(0.0).opts(color="#6b7280", line_width=1, line_dash="dotted", backend="bokeh").opts(
            color="#6b7280", linewidth=0.8, linestyle=":", backend="matplotlib")
        return line_figure([*curves, zero], title=f"Global-mean net TOA flux, {data['period']}")

    def figure_name(self, request: Request) -> str:
        return safe_filename("budget", self._last[0]["period"] if self._last else "")

    def draw(self, data: dict[str, Any], request: Request) -> pn.viewable.Viewable:
        table: pd.DataFrame = data["table"]
        # every source, references first, in the collection's order; no numbers: the reason
        wide = table.pivot(index="model", columns="metric", values="value").reindex(
            index=list(data["names"]), columns=list(budget.BUDGET_METRICS)
        )
        wide.insert(0, "Period", [str(table.loc[table["model"] == n, "period"].iloc[0]) if n in set(table["model"]) else "–" for n in wide.index])
        wide.insert(0, "Role", ["reference" if n in data["references"] else "run" for n in wide.index])
        wide = wide.reset_index().rename(columns={"model": "Source"})
        titles = {"Source": "Source", "Role": "Role", "Period": "Period"}
        formatters = {}
        for metric, units in budget.BUDGET_METRICS.items():
            titles[metric] = text_html(_LABELS[metric]) + (f"<br><small>{text_html(units)}</small>" if units != "1" else "")
            formatters[metric] = NumberFormatter(format="0.000" if units == "1" else "0.00", nan_format="–", text_align="right")
        runs = pn.widgets.Tabulator(wide, show_index=False, disabled=True, selectable=False, titles=titles,
                                    formatters=formatters, layout="fit_columns", sizing_mode="stretch_width", theme="simple",
                                    widths={"Source": 130, "Role": 90, "Period": 100}, stylesheets=[TABLE_CSS],
                                    configuration=_NO_SORT,
                                    css_classes=["gs-budget-table"])
        # why a source has no numbers, in full (a table column would cut or hide the reasons)
        reasons = [f"{name}: {reason}" for name, reason in data["reasons"].items()]
        observed = budget.observed_table().pivot_table(index=["reference", "period"], columns="metric", values="value", sort=False)
        observed = observed.reset_index().rename(columns={"reference": "Published estimate", "period": "Period"})
        obs_titles = {m: text_html(_LABELS.get(m, m)) for m in observed.columns if m not in ("Published estimate", "Period")}
        obs_formatters = {m: NumberFormatter(format="0.000" if m == "albedo" else "0.0", text_align="right") for m in obs_titles}
        estimates = pn.widgets.Tabulator(observed, show_index=False, disabled=True, selectable=False, titles=obs_titles,
                                         formatters=obs_formatters, layout="fit_columns", sizing_mode="stretch_width", theme="simple",
                                         widths={"Published estimate": 500, "Period": 100}, stylesheets=[TABLE_CSS],
                                         configuration=_NO_SORT)
        parts: list[Any] = []
        if data["note"]:
            parts.append(pn.pane.HTML(f'<div class="gs-notice">{text_html(data["note"])}</div>', margin=(0, 10, 6, 10)))
        download = pn.widgets.FileDownload(
            callback=lambda: io.BytesIO(csv_bytes(table)),  # run names as spreadsheet text
            filename=safe_filename("budget", data["period"]) + ".csv",
            label="CSV", color="light", width=100, height=34,
            description=text_tooltip("Download the budget table (tidy: model, period, metric, value, units)"),
        )
        csv_name = safe_filename("budget", data["period"]) + ".csv"
        record = data.get("provenance")
        parts += [
            runs,
            *([pn.pane.HTML('<div class="gs-hint gs-budget-reasons">No numbers for ' + "; ".join(text_html(r) for r in reasons) + "</div>",
                            margin=(4, 10))] if reasons else []),
            pn.Row(pn.pane.HTML('<span class="gs-hint">Download the table:</span>', margin=(12, 4, 0, 10)), download,
                   *([provenance_download(record, csv_name)] if record is not None else [])),
            pn.pane.HTML('<div class="gs-hint">Published global annual means (W m-2, values from memory, rounded):</div>', margin=(8, 10, 0, 10)),
            estimates,
            figure_pane(self.figure(data, request)),
        ]
        return pn.Column(*parts, sizing_mode="stretch_width")
