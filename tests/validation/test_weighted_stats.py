"""Area-weighted statistics against a naive numpy computation and against xskillscore.

The naive reference is deliberately plain: weights written here from the cell bounds
(R² Δsin φ Δλ, times a region fraction computed here), then ``*`` and ``sum``.  The
library reference is xskillscore (weighted RMSE, mean error and Pearson correlation) and
numpy's ``average``/``cov`` with ``aweights``.  Tolerance 1e-10 relative throughout.
"""

from __future__ import annotations

import dask.array as dsa
import numpy as np
import pytest
import xarray as xr
import xskillscore as xs

from evaluation.grid import cell_area
from evaluation.metrics import pattern_stats, weighted_mean
from evaluation.regions import region_weights

R = 6_371_000.0  # IUGG mean radius (value from memory), the tool's radius too
RTOL = 1e-10


def _edges(step: float, start: float, stop: float) -> np.ndarray:
    e = np.linspace(start, stop, int(round((stop - start) / step)) + 1)
    return np.stack([e[:-1], e[1:]], axis=1)


def _grid(dlat: float = 3.0, dlon: float = 4.0) -> xr.Dataset:
    lat_b, lon_b = _edges(dlat, -90, 90), _edges(dlon, -180, 180)
    return xr.Dataset(coords={"lat": lat_b.mean(1), "lon": lon_b.mean(1),
                              "lat_bnds": (("lat", "nv"), lat_b), "lon_bnds": (("lon", "nv"), lon_b)})


def _naive_area(grid: xr.Dataset) -> np.ndarray:
    """R² (sin φn − sin φs)(λe − λw), written out here (Archimedes' zone area)."""
    lat_b, lon_b = np.deg2rad(grid["lat_bnds"].values), np.deg2rad(grid["lon_bnds"].values)
    return R**2 * (np.sin(lat_b[:, 1]) - np.sin(lat_b[:, 0]))[:, None] * (lon_b[:, 1] - lon_b[:, 0])[None, :]


def _naive_band_fraction(grid: xr.Dataset, south: float, north: float) -> np.ndarray:
    """Share of each row's area inside [south, north], by overlap in sin(latitude)."""
    s_b = np.sin(np.deg2rad(grid["lat_bnds"].values))
    lo, hi = np.sin(np.deg2rad(south)), np.sin(np.deg2rad(north))
    inside = np.clip(np.minimum(s_b[:, 1], hi) - np.maximum(s_b[:, 0], lo), 0, None) / (s_b[:, 1] - s_b[:, 0])
    return np.repeat(inside[:, None], grid.sizes["lon"], axis=1)


def _fields(grid: xr.Dataset) -> tuple[xr.DataArray, xr.DataArray]:
    """A reference and a 'run' with structure in latitude and longitude, and a gap."""
    lat = np.deg2rad(grid["lat"].values)[:, None]
    lon = np.deg2rad(grid["lon"].values)[None, :]
    ref = 288.0 - 30.0 * np.sin(lat) ** 2 + 4.0 * np.cos(lat) * np.sin(2 * lon)
    run = ref + 1.3 - 2.5 * np.sin(lat) ** 3 + 1.5 * np.cos(3 * lon) * np.cos(lat) ** 2
    run[5:9, 10:20] = np.nan  # missing cells: excluded from both fields
    ref[40:42, 60:70] = np.nan
    coords = {"lat": grid["lat"].values, "lon": grid["lon"].values}
    return (xr.DataArray(run, dims=("lat", "lon"), coords=coords), xr.DataArray(ref, dims=("lat", "lon"), coords=coords))


def _naive_stats(m: np.ndarray, r: np.ndarray, w: np.ndarray) -> dict[str, float]:
    ok = np.isfinite(m) & np.isfinite(r) & (w > 0)
    m, r, w = m[ok], r[ok], w[ok]
    w = w / w.sum()
    mm, mr = (w * m).sum(), (w * r).sum()
    sm = np.sqrt((w * (m - mm) ** 2).sum())
    sr = np.sqrt((w * (r - mr) ** 2).sum())
    return {
        "mean": mm,
        "ref_mean": mr,
        "bias": mm - mr,
        "rmse": np.sqrt((w * (m - r) ** 2).sum()),
        "crmse": np.sqrt((w * ((m - mm) - (r - mr)) ** 2).sum()),
        "corr": (w * (m - mm) * (r - mr)).sum() / (sm * sr),
        "std": sm,
        "ref_std": sr,
        "std_ratio": sm / sr,
    }


REGIONS = {
    "global": (-90.0, 90.0),
    "tropics": (-30.0, 30.0),
    "nh-extratropics": (30.0, 90.0),
    "antarctic": (-90.0, -60.0),
}


@pytest.mark.parametrize("region", sorted(REGIONS))
def test_pattern_stats_match_naive_numpy(region):
    # Source: definitions of the area-weighted mean, bias, RMSE, centred RMS difference,
    # population standard deviation and Pearson correlation (Taylor 2001, J. Geophys.
    # Res. 106(D7), eqs. 1-2), evaluated with naive numpy on weights written here; rtol 1e-10.
    grid = _grid()
    run, ref = _fields(grid)
    tool_w = cell_area(grid["lat_bnds"].values, grid["lon_bnds"].values).values * region_weights(region, grid).values
    got = pattern_stats(run, ref, xr.DataArray(tool_w, dims=("lat", "lon")))
    w = _naive_area(grid) * _naive_band_fraction(grid, *REGIONS[region])
    expected = _naive_stats(run.values, ref.values, w)
    for key, value in expected.items():
        np.testing.assert_allclose(got[key], value, rtol=RTOL, err_msg=key)


@pytest.mark.parametrize("region", sorted(REGIONS))
def test_pattern_stats_match_xskillscore_and_numpy_cov(region):
    # Source: xskillscore 0.0.x weighted rmse, me (mean error) and pearson_r with
    # skipna; numpy.average and numpy.cov(aweights=..., ddof=0) for the means and the
    # population standard deviations; rtol 1e-10.
    grid = _grid(2.5, 3.75)
    run, ref = _fields(grid)
    w = xr.DataArray(_naive_area(grid) * _naive_band_fraction(grid, *REGIONS[region]), dims=("lat", "lon"),
                     coords={"lat": run["lat"], "lon": run["lon"]})
    got = pattern_stats(run, ref, w)
    ok = run.notnull() & ref.notnull() & (w > 0)
    run_c, ref_c, w_c = run.where(ok), ref.where(ok), w.where(ok, 0.0)
    dims = ["lat", "lon"]
    np.testing.assert_allclose(got["rmse"], float(xs.rmse(run_c, ref_c, dim=dims, weights=w_c, skipna=True)), rtol=RTOL)
    np.testing.assert_allclose(got["bias"], float(xs.me(run_c, ref_c, dim=dims, weights=w_c, skipna=True)), rtol=RTOL)
    np.testing.assert_allclose(got["corr"], float(xs.pearson_r(run_c, ref_c, dim=dims, weights=w_c, skipna=True)), rtol=RTOL)
    # centred RMS difference = RMSE of the anomalies about each field's weighted mean
    anom_m = run_c - float(run_c.weighted(w_c).mean(dims))
    anom_r = ref_c - float(ref_c.weighted(w_c).mean(dims))
    np.testing.assert_allclose(got["crmse"], float(xs.rmse(anom_m, anom_r, dim=dims, weights=w_c, skipna=True)), rtol=RTOL)

    sel = ok.values
    m, r, wv = run.values[sel], ref.values[sel], w.values[sel]
    np.testing.assert_allclose(got["mean"], np.average(m, weights=wv), rtol=RTOL)
    np.testing.assert_allclose(got["ref_mean"], np.average(r, weights=wv), rtol=RTOL)
    cov = np.cov(np.vstack([m, r]), aweights=wv, ddof=0)
    np.testing.assert_allclose(got["std"], np.sqrt(cov[0, 0]), rtol=RTOL)
    np.testing.assert_allclose(got["ref_std"], np.sqrt(cov[1, 1]), rtol=RTOL)
    np.testing.assert_allclose(got["std_ratio"], np.sqrt(cov[0, 0] / cov[1, 1]), rtol=RTOL)
    np.testing.assert_allclose(got["corr"], cov[0, 1] / np.sqrt(cov[0, 0] * cov[1, 1]), rtol=RTOL)


def test_a_field_against_itself():
    # Source: common practice (identities of the definitions): a field scored against
    # itself has zero bias, RMSE and centred RMSE, correlation 1, std ratio 1, skill 1.
    grid = _grid()
    _, ref = _fields(grid)
    got = pattern_stats(ref, ref, xr.DataArray(_naive_area(grid), dims=("lat", "lon")))
    assert got["bias"] == 0.0 and got["rmse"] == 0.0 and got["crmse"] == 0.0
    np.testing.assert_allclose([got["corr"], got["std_ratio"], got["taylor_skill"]], 1.0, rtol=1e-12)


@pytest.mark.parametrize("backend", ["numpy", "dask"])
def test_weighted_mean_of_a_series_matches_xarray_weighted_and_numpy(backend):
    # Source: xarray's DataArray.weighted(...).mean(skipna=True) (NaN data leave the
    # denominator, pydata/xarray#2922) and a naive numpy loop over time steps; rtol 1e-10.
    grid = _grid(4.0, 5.0)
    run, _ = _fields(grid)
    rng_free = np.sin(np.arange(24.0))[:, None, None]  # analytic, no random numbers
    data = run.values[None] + rng_free * np.cos(np.deg2rad(grid["lat"].values))[None, :, None]
    data[3, :, :7] = np.nan
    da = xr.DataArray(data, dims=("time", "lat", "lon"), coords={"lat": grid["lat"].values, "lon": grid["lon"].values})
    if backend == "dask":
        da = da.copy(data=dsa.from_array(data, chunks=(6, -1, -1)))
    w = xr.DataArray(_naive_area(grid) * _naive_band_fraction(grid, -30, 60), dims=("lat", "lon"),
                     coords={"lat": grid["lat"].values, "lon": grid["lon"].values})
    got = weighted_mean(da, w)
    assert isinstance(got.data, dsa.Array) == (backend == "dask")  # stays lazy
    got = got.values
    np.testing.assert_allclose(got, da.weighted(w).mean(("lat", "lon"), skipna=True).values, rtol=RTOL)
    naive = []
    for t in range(data.shape[0]):
        ok = np.isfinite(data[t]) & (w.values > 0)
        naive.append((data[t][ok] * w.values[ok]).sum() / w.values[ok].sum())
    np.testing.assert_allclose(got, naive, rtol=RTOL)


def test_cli_scores_on_one_grid_match_naive_numpy(nc_file, grid_factory, times_factory, score_cli):
    # Source: the same definitions (Taylor 2001) evaluated with naive numpy on weights
    # written here, against the CSV that `gridscore score` writes; fields constant in time,
    # so the climatology is the field itself; rtol 1e-10.
    grid = grid_factory(3.0, 4.0)
    ds_grid = xr.Dataset(coords={"lat": grid["lat"], "lon": grid["lon"],
                                 "lat_bnds": (("lat", "nv"), grid["lat_bnds"]), "lon_bnds": (("lon", "nv"), grid["lon_bnds"])})
    run, ref = _fields(ds_grid)
    run = run.fillna(run.mean())  # gaps in time-constant data would only repeat the test above
    ref = ref.fillna(ref.mean())
    times = times_factory(2001, 2003, "standard")
    attrs = {"units": "K", "standard_name": "air_temperature"}
    ref_path = nc_file("ref.nc", {"tas": (np.repeat(ref.values[None], len(times), 0), attrs)}, grid=grid, times=times)
    run_path = nc_file("run.nc", {"tas": (np.repeat(run.values[None], len(times), 0), attrs)}, grid=grid, times=times)
    table = score_cli(["--reference", f"obs={ref_path}", "--model", f"run-x={run_path}", "--variable", "tas",
                       "--region", "global", "--region", "tropics", "--season", "ANN", "--season", "JJA"])
    assert set(table["period"]) == {"2001-2003"}
    for (region, season), rows in table.groupby(["region", "season"]):
        values = dict(zip(rows["metric"], rows["value"], strict=True))
        w = _naive_area(ds_grid) * _naive_band_fraction(ds_grid, *REGIONS[region])
        expected = _naive_stats(run.values, ref.values, w)
        for key in ("mean", "ref_mean", "bias", "rmse", "crmse", "corr", "std_ratio"):
            np.testing.assert_allclose(values[key], expected[key], rtol=RTOL, err_msg=f"{region} {season} {key}")
