"""Regional-mean time series of every source, with their fitted linear trends."""

from __future__ import annotations

from typing import Any

import holoviews as hv
import numpy as np
import panel as pn

from evaluation.regions import region_label
from evaluation.trends import ols_trend
from evaluation.units import trend_units

from ..state import Request
from .base import ResultView, figure_pane
from .lines import curve, ensemble_bands, line_figure, reference_band

__all__ = ["SeriesView", "ensemble_members", "members_of", "members_of_ensemble"]


def members_of_ensemble(results: Any, name: str) -> tuple[str, ...]:
    """The members of the ensemble whose mean is ``name``; () for any other run."""
    return getattr(results, "ensemble_members", lambda _: ())(name)


def ensemble_members(results: Any, request: Request) -> list[str]:
    """Every member of the ensembles whose mean is among the selected runs."""
    return [m for name in request.models for m in members_of_ensemble(results, name)]


def members_of(results: Any, request: Request, data: dict) -> dict[str, dict]:
    """Selected ensemble mean -> {member: its curve} for the members that have one."""
    return {name: {m: data[m] for m in members_of_ensemble(results, name) if m in data} for name in request.models if members_of_ensemble(results, name)}


class SeriesView(ResultView):
    """Yearly (or seasonal) regional means over the period, one line per source."""

    tab = "series"
    title = "Time series"
    explanation = (
        "The area-weighted mean over the region for each year of the period (for a season, the "
        "season's mean in each year; DJF belongs to the year of its January). Dashed lines are "
        "least-squares trends; the legend gives them per decade. With several references, the grey band "
        "spans them (from the lowest to the highest reference value each year): the observational spread. "
        "An ensemble's mean is a line; the band in its colour spans its members (lowest to highest each year)."
    )

    def key(self, request: Request) -> Any:
        return (request.variable, request.level, request.reference, request.models, request.region, request.season, request.period)

    async def load(self, request: Request) -> dict[str, Any]:
        results = self.results
        series = {}
        for name in (request.reference, *request.models, *await self.alternatives(request)):
            args = (request.reference, request.variable, request.period, request.region, request.season, name, request.level, request.target_grid)
            series[name] = await results.fetch(("series",) + args, results.regional_series, *args)
        for name in ensemble_members(results, request):  # for the members' band, ticked or not
            if name not in series:
                args = (request.reference, request.variable, request.period, request.region, request.season, name, request.level, request.target_grid)
                series[name] = await results.fetch(("series",) + args, results.regional_series, *args)
        return series

    def figure(self, data: dict[str, Any], request: Request) -> hv.Overlay:
        first = next(iter(data.values()))
        units = str(first.attrs.get("units", ""))
        info = self.results.variable_info(request.variable)
        xdim = hv.Dimension("year", label="Year")
        ydim = hv.Dimension("value", label=info.long_name or request.variable, unit=units)
        # the references' spread under the lines; alternative references are drawn only as the band
        members = ensemble_members(self.results, request)
        refs = {n: da for n, da in data.items() if n == request.reference or (n not in request.models and n not in members)}
        band = reference_band(refs, "year", xdim=xdim, ydim=ydim)
        curves: list = [] if band is None else [band]
        curves += ensemble_bands(members_of(self.results, request, data), "year", xdim=xdim, ydim=ydim, colour=self.results.colour)
        for name, da in data.items():
            if (name in refs and name != request.reference) or (name in members and name not in request.models):
                continue
            years = da["year"].values.astype("float64")
            colour = self.results.colour(name)
            fit = ols_trend(da)  # the core's trend: regressed on the year coordinate
            per_decade = f"{fit.slope * 10:+.3g} {trend_units(units)}" if np.isfinite(fit.slope) else "no trend"
            is_ref = name == request.reference
            curves.append(curve(years, da.values, label=f"{name} ({per_decade})", colour=colour, xdim=xdim, ydim=ydim, reference=is_ref))
            if np.isfinite(fit.slope):
                curves.append(
                    curve(years, fit.intercept + fit.slope * years, label=f"{name} ({per_decade})", colour=colour,
                          xdim=xdim, ydim=ydim, dash="dashed")
                )
        region = region_label(request.region)
        title = f"{region}: {request.variable}, {request.season} means {request.period}"
        return line_figure(curves, title=title)

    def draw(self, data: dict[str, Any], request: Request) -> pn.viewable.Viewable:
        return figure_pane(self.figure(data, request))
