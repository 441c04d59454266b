"""The seasonal cycle: the monthly climatology of the regional mean, for every source."""

from __future__ import annotations

from typing import Any

import holoviews as hv
import panel as pn

from evaluation.regions import region_label

from ..state import Request
from .base import ResultView, figure_pane
from .lines import curve, ensemble_bands, line_figure, reference_band
from .series import ensemble_members, members_of

__all__ = ["CycleView"]

_MONTHS = [(i, m) for i, m in enumerate(("Jan", "Feb", "Mar", "Apr", "May", "Jun", "Jul", "Aug", "Sep", "Oct", "Nov", "Dec"), start=1)]


class CycleView(ResultView):
    """Twelve monthly means of the regional mean over the period, one line per source."""

    tab = "cycle"
    title = "Seasonal cycle"
    uses = ("variable", "reference", "region", "period")
    explanation = (
        "The mean of each calendar month over the period, averaged over the region. It shows "
        "whether a run has the right amplitude and timing of the year's cycle (the season "
        "control does not apply here). With several references, the grey band spans them: the "
        "observational spread. An ensemble's mean is a line; the band in its colour spans its members."
    )

    def key(self, request: Request) -> Any:
        return (request.variable, request.level, request.reference, request.models, request.region, request.period)

    async def load(self, request: Request) -> dict[str, Any]:
        results = self.results
        cycles = {}
        for name in (request.reference, *request.models, *await self.alternatives(request)):
            args = (request.reference, request.variable, request.period, request.region, name, request.level, request.target_grid)
            cycles[name] = await results.fetch(("cycle",) + args, results.seasonal_cycle, *args)
        for name in ensemble_members(results, request):  # for the members' band, ticked or not
            if name not in cycles:
                args = (request.reference, request.variable, request.period, request.region, name, request.level, request.target_grid)
                cycles[name] = await results.fetch(("cycle",) + args, results.seasonal_cycle, *args)
        return cycles

    def figure(self, data: dict[str, Any], request: Request) -> hv.Overlay:
        first = next(iter(data.values()))
        units = str(first.attrs.get("units", ""))
        info = self.results.variable_info(request.variable)
        xdim = hv.Dimension("month", label="Month")
        ydim = hv.Dimension("value", label=info.long_name or request.variable, unit=units)
        members = ensemble_members(self.results, request)
        refs = {n: da for n, da in data.items() if n == request.reference or (n not in request.models and n not in members)}
        band = reference_band(refs, "month", xdim=xdim, ydim=ydim)
        bands = ensemble_bands(members_of(self.results, request, data), "month", xdim=xdim, ydim=ydim, colour=self.results.colour)
        curves = ([] if band is None else [band]) + bands + [
            curve(da["month"].values, da.values, label=name, colour=self.results.colour(name), xdim=xdim, ydim=ydim,
                  reference=name == request.reference)
            for name, da in data.items()
            if name == request.reference or (name not in refs and (name not in members or name in request.models))
        ]
        region = region_label(request.region)
        title = f"{region}: monthly climatology of {request.variable}, {request.period}"
        return line_figure(curves, title=title, xticks=_MONTHS, xlim=(0.7, 12.3))

    def figure_name(self, request: Request) -> str:
        return super().figure_name(request).replace(f"_{request.season}_", "_")

    def draw(self, data: dict[str, Any], request: Request) -> pn.viewable.Viewable:
        return figure_pane(self.figure(data, request))
