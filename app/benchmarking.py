"""Server-side timings of the dashboard for benchmarks/run.py.

Measured in one process through the same objects a served session uses
(:class:`app.views.results.Results` and the views' figure builders), without a browser:
the times are what the server spends before it sends the update, not the browser's paint.
"""

from __future__ import annotations

import time
from pathlib import Path
from typing import Any

__all__ = ["measure_dashboard"]


def _timed(function, *args) -> tuple[float, Any]:
    t0 = time.perf_counter()
    out = function(*args)
    return time.perf_counter() - t0, out


def measure_dashboard(data: Path) -> dict[str, float]:
    """Region change → table (uncached, cached) and a 0.25° map render, in seconds."""
    import holoviews as hv
    import xarray as xr

    from app.server import load_results
    from app.views.maps import MapField, colour_range, map_element
    from app.views.scores import score_widget
    from evaluation.regions import bundled_land_fraction  # noqa: F401  (warm import)

    hv.extension("bokeh")
    results = load_results(Path(data) / "manifest.toml")
    variable = results.variables()[0]
    reference = results.references(variable)[0]
    _, period = results.period_info(reference, variable)
    period = str(period)

    def table(region: str):
        key = ("scores", reference, variable, period, region, "ANN")
        tidy = results.product(key, results.scores, reference, variable, period, region, "ANN")
        wide = tidy.pivot_table(index="model", columns="metric", values="value", sort=False).reset_index()
        units = dict(zip(tidy["metric"], tidy["units"], strict=False))
        return score_widget(wide, units)

    first, _ = _timed(table, "global")  # opens the sources and reduces the season (first visit)
    uncached, _ = _timed(table, "tropics")  # a region not seen before: scores recomputed
    cached, _ = _timed(table, "tropics")  # the same selection again: from the product cache

    from importlib import resources

    with resources.as_file(resources.files("evaluation") / "data" / "land_fraction_0p25deg.nc") as path:
        field = xr.load_dataset(path)["sftlf"].astype("float64")
    field.attrs["units"] = "1"
    item = MapField(source="land", title="0.25° field", data=field, signed=False, quantity="Mean")
    clim = colour_range([field], signed=False)

    def render():
        element = map_element(item, clim=clim, units="1")
        return hv.render(element, backend="bokeh")

    map_time, _ = _timed(render)
    return {
        "first_table": first,
        "region_change_uncached": uncached,
        "region_change_cached": cached,
        "map_render_0p25": map_time,
    }
