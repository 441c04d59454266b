"""A change of region on the score table, in headless Chromium, on files written here.

Every table of the view must show the new region's numbers once the region is changed (and
again after a change back, answered from the cache), and the tables must be the ones already
on the page, given new values (the same Bokeh models), not new tables.  Outside references:

- the run and reference means and the bias against numpy: area-weighted means of the
  files' values over the region's cells, with cos φ weights (on a regular latitude grid the
  cell areas R² Δλ (sin φ₊ − sin φ₋) are exactly proportional to cos φ; common practice,
  as the CF conventions' cell_measures area);
- the trend against numpy.polyfit of the area-weighted annual means (least-squares slope,
  per decade);
- the significance table, which numpy cannot redo in a few lines, against the numbers the
  core gives for the same region (the page must show the region picked, whichever it is).
"""

from __future__ import annotations

import io
from pathlib import Path

import cftime
import numpy as np
import pandas as pd
import pytest
import xarray as xr

from app.views.results import Results
from evaluation.catalog import Collection

from .conftest import open_dashboard, serving, wait_for_view

pytestmark = pytest.mark.browser

YEARS = list(range(2001, 2011))
PERIOD = "2001-2010"
LAT = np.arange(-88.0, 90.0, 4.0)  # cell edges every 4° from -90: 30°S and 30°N are edges
LON = np.arange(-178.0, 180.0, 4.0)
#: name -> (offset in K, trend in K per year at the equator)
SOURCES = {"ref": (0.0, 0.02), "warm": (1.5, 0.05), "cool": (-0.8, 0.01)}
TROPICS = "Tropics (30°S–30°N)"

#: Each score table of the page (a DataTabulator model with a Run column): id, fields, data.
_TABLES_JS = """() => {
  const out = [];
  for (const doc of Bokeh.documents) {
    const models = doc.all_models ?? doc._all_models?.values() ?? [];
    for (const m of models) {
      // Panel's Tabulator model: columns, a data source and the cells' styles
      if (m.columns === undefined || m.source === undefined || m.cell_styles === undefined) continue;
      const fields = m.columns.map((c) => c.field);
      if (!fields.includes("Run")) continue;
      const d = m.source.data;
      const get = (k) => { const v = d instanceof Map ? d.get(k) : d[k]; return v ? Array.from(v, (x) => (typeof x === "number" && isNaN(x)) ? null : x) : null; };
      const data = {};
      for (const f of fields) data[f] = get(f);
      out.push({id: m.id, fields, data});
    }
  }
  return out;
}"""


def _field(offset: float, slope: float) -> np.ndarray:
    """Monthly tas (time, lat, lon): a meridional gradient, a zonal wave and a trend that is
    larger at the equator than at the poles, so that regions differ in mean and trend."""
    phi = np.deg2rad(LAT)[None, :, None]
    lam = np.deg2rad(LON)[None, None, :]
    year = np.repeat(np.array(YEARS, dtype="float64"), 12)[:, None, None]
    return 255.0 + offset + 35.0 * np.cos(phi) ** 2 + 2.0 * np.cos(lam) + slope * (1.0 + np.cos(phi) ** 2) * (year - YEARS[0])


def _write(folder: Path, name: str) -> None:
    folder.mkdir(parents=True)
    times = [cftime.DatetimeNoLeap(y, m, 15) for y in YEARS for m in range(1, 13)]
    ds = xr.Dataset(
        {"tas": (("time", "lat", "lon"), _field(*SOURCES[name]), {"units": "K", "standard_name": "air_temperature"})},
        coords={
            "time": ("time", times),
            "lat": ("lat", LAT, {"units": "degrees_north", "standard_name": "latitude"}),
            "lon": ("lon", LON, {"units": "degrees_east", "standard_name": "longitude"}),
        },
        attrs={"Conventions": "CF-1.10"},
    )
    ds["time"].encoding.update(units="days since 2000-01-01", calendar="noleap")
    ds.to_netcdf(folder / "tas.nc")


@pytest.fixture(scope="module")
def collection(tmp_path_factory: pytest.TempPathFactory):
    root = tmp_path_factory.mktemp("regions")
    for name in SOURCES:
        _write(root / name, name)
    manifest = root / "manifest.toml"
    manifest.write_text(
        '[[source]]\nname = "ref"\nrole = "reference"\npaths = ["ref/*.nc"]\n'
        '[[source]]\nname = "warm"\nrole = "model"\npaths = ["warm/*.nc"]\n'
        '[[source]]\nname = "cool"\nrole = "model"\npaths = ["cool/*.nc"]\n',
        encoding="utf-8",
    )
    results = Results(Collection.from_path(manifest))
    with serving(results) as url:
        yield url, results, root
    results.close()


def numpy_scores(root: Path, name: str, south: float, north: float) -> tuple[float, float]:
    """(mean over the period, trend per decade) of a source over the latitudes [south, north],
    from its file with numpy: annual means, then cos φ area weights over the region's cells."""
    from tests.cfdata import netcdf_dataset

    with netcdf_dataset(root / name / "tas.nc") as ds:
        values = np.asarray(ds["tas"][:], dtype="float64")
        lat = np.asarray(ds["lat"][:], dtype="float64")
    inside = (lat > south) & (lat < north)
    weights = np.broadcast_to(np.cos(np.deg2rad(lat[inside]))[:, None], (int(inside.sum()), values.shape[2]))
    annual = values.reshape(len(YEARS), 12, *values.shape[1:]).mean(axis=1)[:, inside, :]
    series = np.array([np.average(a, weights=weights) for a in annual])
    slope = np.polyfit(np.array(YEARS, dtype="float64"), series, 1)[0]
    return float(series.mean()), float(slope * 10.0)


def tables(page) -> dict[str, dict]:
    """The score tables by their first metric column: climatology, trends, significance."""
    found = page.evaluate(_TABLES_JS)
    return {t["fields"][1]: t for t in found}


def wait_for_region(page, expected_mean: dict[str, float], timeout_ms: int = 60_000) -> dict[str, dict]:
    """The tables once the climatology table shows ``expected_mean`` (run -> mean) and the view
    is no longer loading."""
    waited = 0
    while True:
        now = tables(page)
        table = now.get("mean")
        if table is not None and not page.locator(".gs-view-scores.pn-loading").count():
            shown = dict(zip(table["data"]["Run"], table["data"]["mean"], strict=True))
            if all(run in shown and shown[run] is not None and abs(shown[run] - v) < 1e-6 for run, v in expected_mean.items()):
                return now
        if waited > timeout_ms:
            raise AssertionError(f"the climatology table did not show {expected_mean}: {now}")
        page.wait_for_timeout(50)
        waited += 50


def check_region(page, now: dict[str, dict], results: Results, root: Path, region: str, south: float, north: float) -> None:
    ref_mean, ref_trend = numpy_scores(root, "ref", south, north)
    clim, trends, signif = now["mean"], now["trend"], now["bias_signif_area"]
    assert sorted(clim["data"]["Run"]) == ["cool", "warm"]
    for i, run in enumerate(clim["data"]["Run"]):
        mean, trend = numpy_scores(root, run, south, north)
        # numpy area-weighted means and least-squares trend of the files (module docstring)
        assert clim["data"]["mean"][i] == pytest.approx(mean, rel=1e-9, abs=1e-9)
        assert clim["data"]["ref_mean"][i] == pytest.approx(ref_mean, rel=1e-9, abs=1e-9)
        assert clim["data"]["bias"][i] == pytest.approx(mean - ref_mean, rel=1e-7, abs=1e-7)
        j = trends["data"]["Run"].index(run)
        assert trends["data"]["trend"][j] == pytest.approx(trend, rel=1e-6, abs=1e-9)
        assert trends["data"]["ref_trend"][j] == pytest.approx(ref_trend, rel=1e-6, abs=1e-9)
        # the row on the page shows the run's mean as its column's format writes it (one decimal
        # for values in the hundreds: four significant digits)
        rows = page.locator(".gs-view-scores .tabulator-row").filter(has_text=run).all_text_contents()
        assert any(f"{mean:.1f}" in r for r in rows), (run, f"{mean:.1f}", rows)
    # the significance table: the core's numbers for the region shown
    tidy = results.scores("ref", "tas", PERIOD, region, "ANN")
    for i, run in enumerate(signif["data"]["Run"]):
        for metric in signif["fields"][1:]:
            if metric not in set(tidy["metric"]):
                continue
            (value,) = tidy[(tidy["model"] == run) & (tidy["reference"] == "ref") & (tidy["metric"] == metric)]["value"]
            shown = signif["data"][metric][i]
            assert (shown is None and np.isnan(value)) or shown == pytest.approx(float(value), rel=1e-12, abs=1e-12), (run, metric)


def test_every_table_shows_the_new_region_in_place(browser, collection, screenshots: Path) -> None:
    url, results, root = collection
    session = open_dashboard(browser, f"{url}/?tab=scores&period={PERIOD}&region=global")
    page = session.page
    wait_for_view(page, "scores", what=".tabulator-row")
    expected = {run: numpy_scores(root, run, -90.0, 90.0)[0] for run in ("warm", "cool")}
    first = wait_for_region(page, expected)
    assert set(first) == {"mean", "trend", "bias_signif_area"}
    check_region(page, first, results, root, "global", -90.0, 90.0)
    ids = {k: t["id"] for k, t in first.items()}

    page.locator(".gs-region select").select_option(label=TROPICS)
    tropics = {run: numpy_scores(root, run, -30.0, 30.0)[0] for run in ("warm", "cool")}
    assert all(abs(tropics[r] - expected[r]) > 0.1 for r in tropics)  # the regions differ on the page
    now = wait_for_region(page, tropics)
    check_region(page, now, results, root, "tropics", -30.0, 30.0)
    # the same table models, given the tropics' values (no new tables built)
    assert {k: t["id"] for k, t in now.items()} == ids
    assert page.locator(".gs-view-scores").get_by_text("Region Tropics", exact=False).count() >= 1
    # the download buttons, kept too, give the tropics' table under the tropics' name
    with page.expect_download(timeout=60_000) as info:
        page.locator(".gs-download-csv").first.locator("button, a").first.click()
    assert "tropics" in info.value.suggested_filename
    table = pd.read_csv(io.BytesIO(Path(info.value.path()).read_bytes()))
    assert set(table["region"]) == {"tropics"}
    for run, mean in tropics.items():  # the numpy means again, in the file
        (value,) = table[(table["model"] == run) & (table["reference"] == "ref") & (table["metric"] == "mean")]["value"]
        assert value == pytest.approx(mean, rel=1e-9)

    # back to a region seen before: from the cache, again in the same tables
    page.locator(".gs-region select").select_option(label="Global")
    now = wait_for_region(page, expected)
    check_region(page, now, results, root, "global", -90.0, 90.0)
    assert {k: t["id"] for k, t in now.items()} == ids
    page.screenshot(path=str(screenshots / "scores-region-in-place.png"), full_page=True)
    assert session.errors() == []
    session.close()
