"""Downloads of the dashboard opened as a person (or another program) would open them.

Run in headless Chromium on the sample collection: map fields must be CF NetCDF that
gridscore's own ``check`` accepts.
"""

from __future__ import annotations

import subprocess
import sys
import tempfile
from pathlib import Path
from urllib.parse import parse_qs, urlparse

import netCDF4
import pytest

from .conftest import open_dashboard, wait_for_view

pytestmark = pytest.mark.browser


@pytest.fixture(scope="module")
def served(served_sample: str) -> str:
    return served_sample


def download(page, css: str, *, nth: int = 0) -> tuple[str, bytes]:
    with page.expect_download(timeout=60_000) as info:
        page.locator(css).nth(nth).locator("button, a").first.click()
    d = info.value
    return d.suggested_filename, Path(d.path()).read_bytes()


def gridscore_check(path: Path) -> subprocess.CompletedProcess:
    exe = Path(sys.executable).with_name("gridscore")
    return subprocess.run([str(exe), "check", str(path)], capture_output=True, text=True, timeout=120)


@pytest.mark.parametrize("field", ["difference", "model_trend"])
def test_map_downloads_are_cf_netcdf_that_gridscore_check_accepts(browser, served, field: str) -> None:
    session = open_dashboard(browser, served + f"/?variable=tas&season=DJF&field={field}")
    page = session.page
    wait_for_view(page, "maps")
    request = {k: v[0] for k, v in parse_qs(urlparse(page.url).query).items()}
    name, data = download(page, ".gs-view-maps .gs-download-nc")
    with tempfile.TemporaryDirectory() as folder:
        path = Path(folder) / name
        path.write_bytes(data)
        with netCDF4.Dataset(path) as nc:
            # CF-1.10 sections 4.1, 4.2 and 7.1
            for coord, standard, units, axis in (("lat", "latitude", "degrees_north", "Y"), ("lon", "longitude", "degrees_east", "X")):
                var = nc.variables[coord]
                assert (var.standard_name, var.units, var.axis) == (standard, units, axis)
                assert nc.variables[var.bounds].shape == (var.size, 2)
            time = nc.variables["time"]
            start, end = cftime_years(nc, time)
            first, last = (int(y) for y in request["period"].split("-"))
            assert (start, end) == (first - 1, last)  # DJF: from the December before the first year
        checked = gridscore_check(path)
    assert checked.returncode == 0, checked.stdout + checked.stderr
    assert "can be scored" in checked.stdout
    assert session.errors() == []
    session.close()


def cftime_years(nc, time) -> tuple[int, int]:
    """First and last year of the climatology bounds, decoded by cftime."""
    import cftime

    lo, hi = cftime.num2date(nc.variables[time.climatology][0], time.units, time.calendar)
    return lo.year, hi.year
