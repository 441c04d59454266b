"""Zonal-mean profiles: the climatology averaged along longitude, for every source."""

from __future__ import annotations

from typing import Any

import holoviews as hv
import panel as pn

from ..state import Request
from .base import ResultView, figure_pane
from .lines import curve, line_figure, reference_band

__all__ = ["ZonalMeanView"]


class ZonalMeanView(ResultView):
    """One line per source: the mean over longitude of its climatology, against latitude."""

    tab = "zonal"
    title = "Zonal mean"
    uses = ("variable", "reference", "season", "period")
    explanation = (
        "The climatology averaged along each latitude circle (cells missing in the reference are "
        "left out of every source alike). Where a run's line leaves the black reference line, "
        "the run is wrong at that latitude. With several references, the grey band spans them: "
        "a run inside it is as close as the references are to each other."
    )

    def key(self, request: Request) -> Any:
        return (request.variable, request.level, request.reference, request.models, request.season, request.period)

    async def load(self, request: Request) -> dict[str, Any]:
        results = self.results
        profiles = {}
        for name in (request.reference, *request.models, *await self.alternatives(request)):
            args = (request.reference, request.variable, request.period, request.season, name, request.level, request.target_grid)
            profiles[name] = await results.fetch(("zonal",) + args, results.zonal_mean, *args)
        return profiles

    def figure(self, data: dict[str, Any], request: Request) -> hv.Overlay:
        first = next(iter(data.values()))
        units = str(first.attrs.get("units", ""))
        info = self.results.variable_info(request.variable)
        xdim = hv.Dimension("lat", label="Latitude", unit="°N")
        ydim = hv.Dimension("value", label=info.long_name or request.variable, unit=units)
        refs = {n: da for n, da in data.items() if n == request.reference or n not in request.models}
        band = reference_band(refs, "lat", xdim=xdim, ydim=ydim)
        curves = ([] if band is None else [band]) + [
            curve(da["lat"].values, da.values, label=name, colour=self.results.colour(name), xdim=xdim, ydim=ydim,
                  reference=name == request.reference)
            for name, da in data.items()
            if name == request.reference or name not in refs
        ]
        title = f"Zonal mean of {request.variable}, {request.season} {request.period}"
        return line_figure(curves, title=title, xticks=[-90, -60, -30, 0, 30, 60, 90], xlim=(-90, 90))

    def draw(self, data: dict[str, Any], request: Request) -> pn.viewable.Viewable:
        return figure_pane(self.figure(data, request))
