"""Downloads of the dashboard opened as a person (or another program) would open them.

Run in headless Chromium on the sample collection: map fields must be CF NetCDF that
gridscore's own ``check`` accepts.
"""

from __future__ import annotations

import io
import subprocess
import sys
import tempfile
from pathlib import Path
from urllib.parse import parse_qs, urlparse

import pytest
from cfdata import netcdf_dataset

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
        with netcdf_dataset(path) as nc:
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


def test_the_score_csv_comes_with_the_provenance_the_command_line_writes(browser, served, sample_manifest, tmp_path) -> None:
    import json

    import pandas as pd

    session = open_dashboard(browser, served + "/?variable=tas&tab=scores&region=tropics&season=MAM")
    page = session.page
    wait_for_view(page, "scores", what=".tabulator-row")
    request = {k: v[0] for k, v in parse_qs(urlparse(page.url).query).items()}
    csv_name, csv = download(page, ".gs-download-csv")
    name, data = download(page, ".gs-download-provenance")
    assert name == csv_name.removesuffix(".csv") + ".provenance.json"  # the name `score --output x.csv` gives
    dashboard = json.loads(data)
    table = pd.read_csv(io.BytesIO(csv))
    assert set(table["period"]) == {dashboard["period"]} == {request["period"]}

    # the command line on the same reference, variable, region, season and period
    sample = sample_manifest.parent
    runs = request["models"].split(",")
    args = ["score", "--reference", f"tessera-obs={sample}/references/tessera-obs/*.nc", "--variable", "tas",
            "--region", "tropics", "--season", "MAM", "--period", request["period"], "--output", str(tmp_path / "s.csv")]
    for run in runs:
        args += ["--model", f"{run}={sample}/runs/{run}/*.nc"]
    exe = Path(sys.executable).with_name("gridscore")
    done = subprocess.run([str(exe), *args], capture_output=True, text=True, timeout=600)
    assert done.returncode == 0, done.stderr
    cli = json.loads((tmp_path / "s.provenance.json").read_text())
    assert set(dashboard) >= set(cli) - {"notes"}, set(cli) - set(dashboard)
    for key in ("variable", "period", "seasons", "regions", "regrid", "target_grid"):
        assert dashboard[key] == cli[key], key
    assert {i["path"] for i in cli["inputs"]} <= {i["path"] for i in dashboard["inputs"]}
    assert session.errors() == []
    session.close()


def test_p_values_below_a_thousandth_read_as_such_in_the_score_table(browser, served) -> None:
    # the sample's global tas trends are far from zero (0.19 K/decade over 30 years): the
    # t-test's p-value is far below 0.001 (Santer et al. 2000 with the sample's small noise)
    session = open_dashboard(browser, served + "/?variable=tas&tab=scores")
    page = session.page
    wait_for_view(page, "scores", what=".tabulator-row")
    # the p-value columns only: a relative error of exactly 0 (the median run) rightly reads 0.0000
    cells = page.locator(
        ".gs-view-scores .tabulator-cell[tabulator-field='trend_pvalue'],"
        ".gs-view-scores .tabulator-cell[tabulator-field='ref_trend_pvalue']"
    ).all_text_contents()
    assert cells and all(c.strip() == "< 0.001" for c in cells), cells
    assert session.errors() == []
    session.close()
