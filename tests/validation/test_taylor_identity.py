"""Taylor (2001) identities on every row that ``gridscore score`` writes.

Two analytic runs on grids other than the reference's, in other calendars (360_day with
longitudes 0..360; noleap on a pole-centred grid without bounds), are scored against an
analytic reference on a 4 x 5 degree standard-calendar grid that carries its own land
fraction.  Regions include a box across the dateline and land/ocean; seasons include DJF.

The table has ``std_ratio`` but not the standard deviations themselves, so the
reference's σ_r is computed here, independently, from the reference file's numbers: a
hand-built season mean (cftime month lengths, December of the previous year for DJF),
area weights R² Δsin φ Δλ and region fractions written out below.  Then
σ_m = std_ratio · σ_r, and

    crmse² = σ_m² + σ_r² − 2 σ_m σ_r corr      (Taylor 2001, J. Geophys. Res. 106(D7), eq. 2)
    rmse²  = bias² + crmse²                     (Taylor 2001, eq. 3 with the mean removed)
    S      = 4 (1 + R) / ((σ̂ + 1/σ̂)² (1 + R0)), R0 = 1   (Taylor 2001, eq. 4)

hold to 1e-9 relative for every (run, region, season).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from scipy import stats
from statsmodels.tsa.stattools import acf

R = 6_371_000.0  # IUGG mean radius (value from memory)
PERIOD = range(1991, 2001)
REGIONS = ["global", "tropics", "arctic", "land", "ocean", "box:-20,20,152,-163", "box:30,60,-10,40"]
SEASONS = ["ANN", "DJF", "MAM", "JJA", "SON", "JAN"]
IDENTITY_RTOL = 1e-9


def _field(year: np.ndarray, month: np.ndarray, lat: np.ndarray, lon: np.ndarray) -> np.ndarray:
    """The analytic 'truth' (K): structure in latitude and longitude, a seasonal cycle,
    year-to-year variations and a trend of 0.2 K per decade."""
    y, m = year[:, None, None], month[:, None, None]
    phi, lam = np.deg2rad(lat)[None, :, None], np.deg2rad(lon)[None, None, :]
    return (288.0 - 30.0 * np.sin(phi) ** 2 + 4.0 * np.cos(phi) * np.sin(2 * lam) + 2.0 * np.cos(3 * lam) * np.cos(phi) ** 2
            + 8.0 * np.sin(phi) * np.cos(2 * np.pi * (m - 1) / 12)
            + 0.4 * np.sin(1.7 * y + lam) * np.cos(phi) + 0.2 * np.cos(2.9 * y)
            + 0.02 * (y - 1990))


def _run_a(year, month, lat, lon):
    phi, lam = np.deg2rad(lat)[None, :, None], np.deg2rad(lon)[None, None, :]
    return _field(year, month, lat, lon) + 0.8 - 1.5 * np.sin(phi) ** 3 + 0.5 * np.sin(lam - 0.3) + 0.01 * (year[:, None, None] - 1990)


def _run_b(year, month, lat, lon):
    phi, lam = np.deg2rad(lat)[None, :, None], np.deg2rad(lon)[None, None, :]
    seas = np.cos(2 * np.pi * (month[:, None, None] - 1) / 12)
    return 1.1 * (_field(year, month, lat, lon) - 288.0) + 287.0 + 1.2 * np.cos(2 * lam) * np.cos(phi) + 0.6 * seas * np.sin(phi)


def _land(lat: np.ndarray, lon: np.ndarray) -> np.ndarray:
    phi, lam = np.deg2rad(lat)[:, None], np.deg2rad(lon)[None, :]
    return np.clip(0.4 + 0.8 * np.sin(2 * lam) * np.cos(phi) - 0.3 * np.sin(phi), 0.0, 1.0)


def _axes(times):
    return np.array([t.year for t in times], dtype=float), np.array([t.month for t in times], dtype=float)


@pytest.fixture(scope="module")
def sources(tmp_path_factory, nc_writer, grid_factory, times_factory):
    """Three CF files on disk; returns their paths and the numbers written (as read back)."""
    folder = tmp_path_factory.mktemp("taylor")
    attrs = {"units": "K", "standard_name": "air_temperature", "long_name": "near-surface air temperature"}
    out = {}

    grid = grid_factory(4.0, 5.0)
    times = times_factory(1991, 2000, "standard")
    data = _field(*_axes(times), grid["lat"], grid["lon"]).astype("float32")
    land = _land(grid["lat"], grid["lon"]).astype("float32")
    path = nc_writer(folder / "ref.nc", {"tas": (data, attrs), "sftlf": (land, {"units": "1", "standard_name": "land_area_fraction"})},
                     grid=grid, times=times, calendar="standard")
    out["obs"] = {"path": path, "grid": grid, "times": times, "data": data.astype("float64"), "land": land.astype("float64")}

    grid = grid_factory(3.0, 3.0, lon0=0.0)
    times = times_factory(1989, 2002, "360_day")
    data = _run_a(*_axes(times), grid["lat"], grid["lon"]).astype("float32")
    path = nc_writer(folder / "run_a.nc", {"tas": (data, attrs)}, grid=grid, times=times, calendar="360_day")
    out["run-a"] = {"path": path, "grid": grid, "times": times, "data": data.astype("float64")}

    lat = np.linspace(-90.0, 90.0, 73)  # pole-centred rows, bounds left to the tool
    lon = np.arange(-180.0, 180.0, 3.75)
    grid = {"lat": lat, "lon": lon}
    times = times_factory(1990, 2001, "noleap")
    data = _run_b(*_axes(times), lat, lon).astype("float32")
    path = nc_writer(folder / "run_b.nc", {"tas": (data, attrs)}, grid=grid, times=times, calendar="noleap", bounds=False)
    out["run-b"] = {"path": path, "grid": grid, "times": times, "data": data.astype("float64")}
    return out


def _cli_args(sources, regions, seasons, regrid):
    args = ["--reference", f"obs={sources['obs']['path']}", "--model", f"run-a={sources['run-a']['path']}",
            "--model", f"run-b={sources['run-b']['path']}", "--variable", "tas", "--regrid", regrid]
    for r in regions:
        args += ["--region", r]
    for s in seasons:
        args += ["--season", s]
    return args


@pytest.fixture(scope="module")
def conservative_table(sources, score_main, tmp_path_factory):
    return score_main(_cli_args(sources, REGIONS, SEASONS, "conservative"), tmp_path_factory.mktemp("out") / "scores.csv")


@pytest.fixture(scope="module")
def bilinear_table(sources, score_subprocess, tmp_path_factory):
    # the installed console script, as a user runs it
    return score_subprocess(_cli_args(sources, ["global", "box:-20,20,152,-163", "land"], ["ANN", "DJF"], "bilinear"),
                            tmp_path_factory.mktemp("out") / "scores.csv")


# ---------------------------------------------------------------- independent weights
def _bounds(grid):
    if "lat_bnds" in grid:
        return grid["lat_bnds"], grid["lon_bnds"]
    raise AssertionError("only the reference grid is needed here, and it has bounds")


def _area(grid) -> np.ndarray:
    lat_b, lon_b = (np.deg2rad(b) for b in _bounds(grid))
    return R**2 * (np.sin(lat_b[:, 1]) - np.sin(lat_b[:, 0]))[:, None] * (lon_b[:, 1] - lon_b[:, 0])[None, :]


def _lat_share(lat_b: np.ndarray, south: float, north: float) -> np.ndarray:
    s = np.sin(np.deg2rad(lat_b))
    lo, hi = np.sin(np.deg2rad(south)), np.sin(np.deg2rad(north))
    return np.clip(np.minimum(s[:, 1], hi) - np.maximum(s[:, 0], lo), 0, None) / (s[:, 1] - s[:, 0])


def _lon_share(lon_b: np.ndarray, west: float, east: float, samples: int = 2000) -> np.ndarray:
    """Share of each column inside the arc from west eastwards to east, by midpoint
    sampling (box edges at multiples of 0.5 deg fall on sample edges: exact)."""
    width = (east - west) % 360.0
    frac = (np.arange(samples) + 0.5) / samples
    pts = lon_b[:, :1] + frac[None, :] * (lon_b[:, 1:] - lon_b[:, :1])
    return (((pts - west) % 360.0) < width).mean(axis=1)


def _region_weights(region: str, obs) -> np.ndarray:
    grid = obs["grid"]
    lat_b, lon_b = _bounds(grid)
    bands = {"global": (-90, 90), "tropics": (-30, 30), "arctic": (60, 90), "land": (-90, 90), "ocean": (-90, 90)}
    if region.startswith("box:"):
        s, n, w, e = (float(v) for v in region[4:].split(","))
        share = _lat_share(lat_b, s, n)[:, None] * _lon_share(lon_b, w, e)[None, :]
    else:
        share = np.repeat(_lat_share(lat_b, *bands[region])[:, None], lon_b.shape[0], axis=1)
    if region == "land":
        share = share * obs["land"]
    elif region == "ocean":
        share = share * (1.0 - obs["land"])
    return _area(grid) * share


# ---------------------------------------------------------------- independent statistics
def _santer(y: np.ndarray, x: np.ndarray) -> tuple[float, float]:
    """OLS slope and Santer et al. (2000) p-value, with statsmodels, its acf and scipy.stats.t."""
    res = sm.OLS(y, sm.add_constant(x)).fit()
    e = res.resid
    r1 = acf(e, nlags=1, fft=False)[1]
    n = y.size
    n_eff = n * (1 - r1) / (1 + r1) if r1 > 0 else n
    if n_eff <= 2:
        return float(res.params[1]), float("nan")
    se = np.sqrt(np.sum(e**2) / (n_eff - 2) / np.sum((x - x.mean()) ** 2))
    return float(res.params[1]), float(2 * stats.t.sf(abs(res.params[1] / se), n_eff - 2))


def _rows(table: pd.DataFrame):
    for key, rows in table.groupby(["model", "region", "season"]):
        values = dict(zip(rows["metric"], rows["value"], strict=True))
        assert len(values) == len(rows) == 19, key  # one row per contract metric (14 scores, 5 significance rows)
        yield key, values


def _check_identities(key, v: dict[str, float], sigma_r: float) -> None:
    # Taylor (2001, J. Geophys. Res. 106(D7) 7183-7192), eqs. 2-4.
    sigma_m = v["std_ratio"] * sigma_r
    law_of_cosines = sigma_m**2 + sigma_r**2 - 2 * sigma_m * sigma_r * v["corr"]
    np.testing.assert_allclose(v["crmse"] ** 2, law_of_cosines, rtol=IDENTITY_RTOL, err_msg=f"{key} crmse^2")
    np.testing.assert_allclose(v["rmse"] ** 2, v["bias"] ** 2 + v["crmse"] ** 2, rtol=IDENTITY_RTOL, err_msg=f"{key} rmse^2")
    sh = v["std_ratio"]
    np.testing.assert_allclose(v["taylor_skill"], 4 * (1 + v["corr"]) / ((sh + 1 / sh) ** 2 * 2), rtol=IDENTITY_RTOL, err_msg=f"{key} skill")
    np.testing.assert_allclose(v["bias"], v["mean"] - v["ref_mean"], rtol=1e-12, atol=1e-12, err_msg=f"{key} bias")


def _reference_climatology(obs, season: str, by_hand) -> tuple[np.ndarray, dict[int, np.ndarray]]:
    yearly = by_hand.season_means(obs["data"], obs["times"], season, PERIOD)
    return np.mean(list(yearly.values()), axis=0), yearly


def _weighted(field: np.ndarray, w: np.ndarray) -> float:
    return float((field * w).sum() / w.sum())


def test_every_row_satisfies_the_taylor_identities(conservative_table, sources, by_hand):
    # Source: Taylor (2001, J. Geophys. Res. 106(D7)), eqs. 2-4 (law of cosines, RMSE
    # decomposition, skill score with R0 = 1); sigma_r from a hand-built reference
    # climatology (cftime month lengths) and area weights written here; rtol 1e-9.
    table = conservative_table
    assert set(table["period"]) == {"1991-2000"}  # the common complete years of the three sources
    groups = list(_rows(table))
    assert len(groups) == 2 * len(REGIONS) * len(SEASONS)
    obs = sources["obs"]
    for key, v in groups:
        _, region, season = key
        clim, _ = _reference_climatology(obs, season, by_hand)
        w = _region_weights(region, obs)
        mean_r = _weighted(clim, w)
        sigma_r = np.sqrt(_weighted((clim - mean_r) ** 2, w))
        # the reference's regional mean, by hand (for DJF: December of the year before)
        np.testing.assert_allclose(v["ref_mean"], mean_r, rtol=1e-12, err_msg=f"{key} ref_mean")
        _check_identities(key, v, sigma_r)


def test_every_bilinear_row_satisfies_the_taylor_identities(bilinear_table, sources, by_hand):
    # Source: Taylor (2001, J. Geophys. Res. 106(D7)), eqs. 2-4, as above, for the
    # installed console script with --regrid bilinear; rtol 1e-9.
    groups = list(_rows(bilinear_table))
    assert len(groups) == 2 * 3 * 2
    obs = sources["obs"]
    for key, v in groups:
        _, region, season = key
        clim, _ = _reference_climatology(obs, season, by_hand)
        w = _region_weights(region, obs)
        mean_r = _weighted(clim, w)
        np.testing.assert_allclose(v["ref_mean"], mean_r, rtol=1e-12, err_msg=f"{key} ref_mean")
        _check_identities(key, v, np.sqrt(_weighted((clim - mean_r) ** 2, w)))


def test_relative_error_follows_gleckler(conservative_table):
    # Source: Gleckler, Taylor and Doutriaux (2008, J. Geophys. Res. 113, D06104), eq. 1:
    # E' = (E - median E) / median E across the runs; with two runs the median is their
    # mean (numpy.median); rtol 1e-12.
    wide = conservative_table.pivot_table(index=["region", "season"], columns=["metric", "model"], values="value")
    med = np.median(wide["rmse"].values, axis=1)
    for name in ("run-a", "run-b"):
        np.testing.assert_allclose(wide["rel_error"][name].values, (wide["rmse"][name].values - med) / med, rtol=1e-12)


def test_reference_trend_and_santer_pvalue_on_every_row(conservative_table, sources, by_hand):
    # Source: statsmodels OLS slope (x10 per decade) of the hand-built reference regional
    # series, and the Santer et al. (2000, J. Geophys. Res. 105(D6)) effective-sample-size
    # t-test written here with statsmodels' acf and scipy.stats.t; rtol 1e-9.
    obs = sources["obs"]
    for key, v in _rows(conservative_table):
        _, region, season = key
        _, yearly = _reference_climatology(obs, season, by_hand)
        w = _region_weights(region, obs)
        years = np.array(sorted(yearly), dtype=float)
        series = np.array([_weighted(yearly[int(y)], w) for y in years])
        slope, pvalue = _santer(series, years)
        np.testing.assert_allclose(v["ref_trend"], 10 * slope, rtol=1e-9, err_msg=f"{key} ref_trend")
        np.testing.assert_allclose(v["ref_trend_pvalue"], pvalue, rtol=1e-8, err_msg=f"{key} ref_trend_pvalue")


@pytest.mark.parametrize("name", ["run-a", "run-b"])
def test_global_run_numbers_match_its_native_grid(conservative_table, sources, by_hand, name):
    # Source: conservative remapping preserves the area integral (Jones 1999, Mon. Wea.
    # Rev. 127, 2204-2210), so the run's global numbers on the reference grid equal those
    # computed here on its own grid and calendar (360_day / noleap month lengths from
    # cftime), on the reference's label years (DJF 1991 lacks December 1990 in the
    # reference, so it is left out of both); trend with statsmodels OLS, interannual std
    # ratio with numpy on linregress residuals; rtol 1e-9.
    run, obs = sources[name], sources["obs"]
    lat = run["grid"]["lat"]
    lat_b = np.clip(np.concatenate([[lat[0] - (lat[1] - lat[0]) / 2], (lat[1:] + lat[:-1]) / 2, [lat[-1] + (lat[1] - lat[0]) / 2]]), -90, 90)
    w = np.diff(np.sin(np.deg2rad(lat_b)))[:, None] * np.ones(run["grid"]["lon"].size)[None, :]  # equal columns: dlon cancels
    w_obs = _region_weights("global", obs)
    for (model, region, season), v in _rows(conservative_table):
        if model != name or region != "global":
            continue
        _, ref_yearly = _reference_climatology(obs, season, by_hand)
        yearly = by_hand.season_means(run["data"], run["times"], season, sorted(ref_yearly))
        assert sorted(yearly) == sorted(ref_yearly)
        if season == "DJF":
            assert min(ref_yearly) == 1992
        clim = np.mean(list(yearly.values()), axis=0)
        np.testing.assert_allclose(v["mean"], _weighted(clim, w), rtol=1e-9, err_msg=f"{name} {season} mean")
        years = np.array(sorted(yearly), dtype=float)
        series = np.array([_weighted(yearly[int(y)], w) for y in years])
        ref_series = np.array([_weighted(ref_yearly[int(y)], w_obs) for y in years])
        slope, pvalue = _santer(series, years)
        np.testing.assert_allclose(v["trend"], 10 * slope, rtol=1e-9, err_msg=f"{name} {season} trend")
        np.testing.assert_allclose(v["trend_pvalue"], pvalue, rtol=1e-8, err_msg=f"{name} {season} trend_pvalue")
        resid = series - (stats.linregress(years, series).intercept + stats.linregress(years, series).slope * years)
        ref_resid = ref_series - (stats.linregress(years, ref_series).intercept + stats.linregress(years, ref_series).slope * years)
        np.testing.assert_allclose(v["iav_ratio"], np.std(resid, ddof=1) / np.std(ref_resid, ddof=1), rtol=1e-9, err_msg=f"{name} {season} iav")
