"""Text from files and manifests reaches the page as text, never as markup.

A small collection is written to ``tmp_path`` whose manifest title and descriptions, file
attributes (``long_name``, ``title``, ``history``) and a run's name carry ``<script>`` and
``<img src=x onerror=...>``.  The page must show those strings literally, create no such
element and run none of the script; the odd run name (with a comma) must survive the
shared link.
"""

from __future__ import annotations

import time
from pathlib import Path

import cftime
import numpy as np
import pytest
import xarray as xr

from app.state import TABS
from app.views.results import Results
from evaluation.catalog import Collection

from .conftest import open_dashboard, serving, wait_for_view

pytestmark = pytest.mark.browser

SCRIPT = "<script>window.__xss = 'script'</script>"
IMAGE = "<img src=x onerror=\"window.__xss = 'img'\">"
ODD_RUN = "run <i>x</i>, two"


def _write_source(folder: Path, name: str, *, offset: float) -> None:
    """Three years of monthly tas on a 10-degree grid, with hostile attributes."""
    folder.mkdir(parents=True)
    lat = np.arange(-85.0, 90.0, 10.0)
    lon = np.arange(-175.0, 180.0, 10.0)
    times = [cftime.DatetimeNoLeap(y, m, 15) for y in (2001, 2002, 2003) for m in range(1, 13)]
    month = np.array([t.month for t in times])[:, None, None]
    field = (
        288.0 + offset
        - 30.0 * np.sin(np.deg2rad(lat))[None, :, None] ** 2
        + 5.0 * np.cos(2 * np.pi * month / 12.0) * np.sin(np.deg2rad(lat))[None, :, None]
        + 2.0 * np.cos(np.deg2rad(lon))[None, None, :]
    )
    ds = xr.Dataset(
        {"tas": (("time", "lat", "lon"), field.astype("float32"),
                 {"units": "K", "standard_name": "air_temperature", "long_name": f"air temperature {IMAGE}"})},
        coords={
            "time": ("time", times),
            "lat": ("lat", lat, {"units": "degrees_north", "standard_name": "latitude"}),
            "lon": ("lon", lon, {"units": "degrees_east", "standard_name": "longitude"}),
        },
        attrs={"Conventions": "CF-1.10", "title": f"{name} {SCRIPT}", "history": f"made by hand {IMAGE}"},
    )
    ds["time"].encoding.update(units="days since 2000-01-01", calendar="noleap")
    ds.to_netcdf(folder / "tas.nc")


def _toml(text: str) -> str:
    return '"' + text.replace("\\", "\\\\").replace('"', '\\"') + '"'


@pytest.fixture(scope="module")
def hostile(tmp_path_factory: pytest.TempPathFactory):
    root = tmp_path_factory.mktemp("hostile")
    _write_source(root / "ref", "ref", offset=0.0)
    _write_source(root / "odd", ODD_RUN, offset=1.0)
    _write_source(root / "plain", "plain", offset=-0.5)
    manifest = root / "manifest.toml"
    manifest.write_text(
        f"title = {_toml('Odd ' + SCRIPT)}\n"
        f"description = {_toml('Described ' + IMAGE)}\n"
        f'[[source]]\nname = "ref"\nrole = "reference"\npaths = ["ref/*.nc"]\ndescription = {_toml(SCRIPT)}\n'
        f'[[source]]\nname = {_toml(ODD_RUN)}\nrole = "model"\npaths = ["odd/*.nc"]\ndescription = {_toml(IMAGE)}\n'
        f'[[source]]\nname = "plain"\nrole = "model"\npaths = ["plain/*.nc"]\n',
        encoding="utf-8",
    )
    results = Results(Collection.from_path(manifest))
    with serving(results) as url:
        yield url
    results.close()


def _no_markup_ran(page) -> None:
    assert page.evaluate("() => window.__xss === undefined"), "a string from a file ran as script"
    # Playwright's CSS engine looks inside shadow roots, where Panel renders its panes
    assert page.locator("img[src='x']").count() == 0
    assert page.locator("i", has_text="x").count() == 0


def test_file_strings_are_shown_as_text(browser, hostile, screenshots: Path) -> None:
    session = open_dashboard(browser, hostile + "/")
    page = session.page
    wait_for_view(page, "maps")
    # the manifest's title and description, and a source description, appear literally
    assert page.get_by_text("Odd " + SCRIPT).count() >= 1
    assert page.get_by_text("Described " + IMAGE).count() >= 1
    # the long_name from the files, in the line saying what the maps show
    assert page.get_by_text(f"air temperature {IMAGE}", exact=False).count() >= 1
    _no_markup_ran(page)
    page.screenshot(path=str(screenshots / "file-text.png"), full_page=True)
    for tab in ("scores", "series", "taylor"):
        page.locator(".gs-tabs").get_by_text(TABS[tab], exact=True).first.click()
        wait_for_view(page, tab, what=".tabulator-row" if tab == "scores" else "canvas")
        _no_markup_ran(page)
        if tab == "scores":  # the odd run's name is a cell of the score table, as text
            assert page.locator(".gs-view-scores").get_by_text(ODD_RUN, exact=True).count() >= 1
    assert session.errors() == []
    session.close()


def test_a_run_name_with_a_comma_survives_the_link(browser, hostile) -> None:
    session = open_dashboard(browser, hostile + "/?tab=scores")
    page = session.page
    wait_for_view(page, "scores", what=".tabulator-row")
    deadline = time.monotonic() + 30
    while "models=" not in page.url:
        assert time.monotonic() < deadline, page.url
        page.wait_for_timeout(20)
    link = page.url
    assert "run%20%3Ci%3Ex%3C%2Fi%3E%2C%20two" in link  # the comma inside the name is escaped
    session.close()
    again = open_dashboard(browser, link)
    wait_for_view(again.page, "scores", what=".tabulator-row")
    assert again.page.locator(".gs-view-scores").get_by_text(ODD_RUN, exact=True).count() >= 1
    assert again.page.locator(".gs-notice").count() == 0
    assert again.errors() == []
    again.close()
