"""A regional collection's maps show its domain, not a small patch on the globe.

Two regional files (a reference and a run on a 2-degree grid over 10–40 N, 30–60 E, one
year of monthly means) are served; the maps' shared axes ranges are read from the page's
Bokeh document and compared with the domain's box, taken from the files' CF cell bounds
(cf-conventions 7.1, "Cell Boundaries").  The view keeps the whole-globe map's equal
degrees across and up (2:1), so the box fills the map's width or its height.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from app.views.results import Results
from evaluation.catalog import Collection

from .conftest import PAGE_MODELS_JS, open_dashboard, serving, wait_for_view

pytestmark = pytest.mark.browser

RANGES_JS = """() => {
  const out = [];
  for (const m of """ + PAGE_MODELS_JS + """) {
    if (!m.renderers || !m.x_range || !m.renderers.some(r => r.glyph && r.glyph.type === "Image")) continue;
    const image = m.renderers.find(r => r.glyph.type === "Image").data_source.data;
    const column = image instanceof Map ? image.get("image") : image.image;
    if (!column || column.length === 0) continue;
    out.push([m.x_range.start, m.x_range.end, m.y_range.start, m.y_range.end]);
  }
  return out;
}"""


def _regional(path: Path, offset: float) -> tuple[float, float, float, float]:
    from cfdata import cf_dataset

    lat, lon = np.arange(11.0, 40.0, 2.0), np.arange(31.0, 60.0, 2.0)
    ds = cf_dataset(variable="tas", lat=lat, lon=lon, years=1, start_year=2001, offset=offset)
    path.parent.mkdir(parents=True, exist_ok=True)
    ds.to_netcdf(path, encoding={name: {"_FillValue": None} for name in ds.coords}, format="NETCDF4")
    lat_b = ds[ds["lat"].attrs["bounds"]].values
    lon_b = ds[ds["lon"].attrs["bounds"]].values
    return float(lon_b.min()), float(lon_b.max()), float(lat_b.min()), float(lat_b.max())


def test_a_regional_domain_fills_its_maps(browser, tmp_path: Path) -> None:
    root = tmp_path / "c"
    west, east, south, north = _regional(root / "references" / "ref" / "data.nc", 0.0)
    _regional(root / "runs" / "a" / "data.nc", 1.0)
    assert (west, east, south, north) == (30.0, 60.0, 10.0, 40.0)
    results = Results(Collection.from_path(root))
    with serving(results) as url:
        session = open_dashboard(browser, url + "/?field=model_mean")
        page = session.page
        wait_for_view(page, "maps")
        page.wait_for_function(f"({RANGES_JS})().length === 2", timeout=60_000)
        ranges = page.evaluate(RANGES_JS)
        assert len({tuple(r) for r in ranges}) == 1  # linked: one range for every map
        x0, x1, y0, y1 = ranges[0]
        # the domain lies inside the view ...
        assert x0 <= west + 1e-9 and x1 >= east - 1e-9 and y0 <= south + 1e-9 and y1 >= north - 1e-9
        # ... fills it in one direction, and the view keeps 2 degrees across for 1 up
        assert (x0, x1) == pytest.approx((west, east)) or (y0, y1) == pytest.approx((south, north))
        assert (x1 - x0) == pytest.approx(2 * (y1 - y0))
        assert x1 - x0 < 90  # not the whole globe (360 degrees)
        assert session.errors() == []
        session.close()
    results.close()
