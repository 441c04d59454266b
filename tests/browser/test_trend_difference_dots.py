"""Dots on the run-trend-minus-reference-trend maps in headless Chromium, on the sample collection.

The sample's tidewell-3 warms too fast by construction (0.36 against the reference's 0.19
K/decade, sample_output/manifest.toml), so its trend-difference map must carry dots, and
every dotted cell must show a warmer trend than the reference's.  The dots drawn on the
page are read from its Bokeh document and compared with the flag variable of the map's
NetCDF download (CF 1.10 section 3.5), thinned as the maps thin them.
"""

from __future__ import annotations

import os
import tempfile
from pathlib import Path

import numpy as np
import pytest
import xarray as xr
from cfdata import netcdf_dataset

from app.views.maps import STIPPLE_LEGEND, stipple_points

from .conftest import open_dashboard, wait_for_view
from .test_stippling import glyphs

pytestmark = pytest.mark.browser

#: where a run by hand keeps its screenshots to look at (unset: none are kept)
NOTES = Path(os.environ["GRIDSCORE_SCREENSHOTS"]) if os.environ.get("GRIDSCORE_SCREENSHOTS") else None


def test_trend_difference_map_is_dotted_like_its_download(browser, served_sample: str, screenshots: Path) -> None:
    session = open_dashboard(browser, served_sample + "/?variable=tas&field=trend_difference&models=tidewell-3&period=1991-2020&season=ANN")
    page = session.page
    wait_for_view(page, "maps", timeout_ms=300_000)  # the first view reduces the sample cold
    dots = [n for kind, n in glyphs(page) if kind == "Scatter"]
    assert len(dots) == 1 and dots[0] > 0, dots
    legend = STIPPLE_LEGEND[0].upper() + STIPPLE_LEGEND[1:]
    assert page.get_by_text(legend, exact=False).count() >= 1
    assert page.get_by_text("trend-difference maps: run trend minus reference trend", exact=False).count() >= 1
    page.wait_for_timeout(500)
    page.screenshot(path=str(screenshots / "stippled-trend_difference.png"), full_page=True)
    if NOTES is not None and NOTES.is_dir():
        page.screenshot(path=str(NOTES / "after-trenddiff-test.png"), full_page=True)

    button = page.locator(".gs-view-maps .gs-download-nc").filter(has_text="tidewell-3")
    with page.expect_download(timeout=120_000) as info:
        button.locator("button, a").first.click()
    data = Path(info.value.path()).read_bytes()
    with tempfile.TemporaryDirectory() as folder:
        path = Path(folder) / "field.nc"
        path.write_bytes(data)
        with netcdf_dataset(path) as nc:
            field_var = nc.variables["tas_trend_difference"]
            flag_name = field_var.ancillary_variables
            flags_var = nc.variables[flag_name]
            # CF 1.10 section 3.5: one flag meaning per flag value
            assert list(flags_var.flag_values) == [0, 1, 2]
            assert flags_var.flag_meanings.split() == ["not_tested", "not_significant", "significant"]
            assert "Benjamini-Hochberg" in flags_var.comment and "Welch-Satterthwaite" in flags_var.comment
            flags = np.asarray(flags_var[:]).squeeze()
            trend = np.ma.filled(np.asarray(field_var[:], dtype="float64"), np.nan).squeeze()
            lat = np.asarray(nc.variables["lat"][:], dtype="float64")
            lon = np.asarray(nc.variables["lon"][:], dtype="float64")
    significant = flags == 2
    assert significant.sum() > 0
    # the injected excess warming: every dotted cell warms faster than the reference
    assert (trend[significant] > 0).all(), trend[significant].min()
    # the page draws the download's flags, thinned by block majority as the maps do
    on_page = len(stipple_points(xr.DataArray(flags, dims=("lat", "lon"), coords={"lat": lat, "lon": lon}))[0])
    assert dots[0] == on_page
    assert session.errors() == []
    session.close()
