"""Two open datasets that statsmodels ships, through the tool's time-series functions.

* ``statsmodels.api.datasets.elnino``: monthly sea-surface temperature (degC) of the
  Pacific between 0-10 S and 90-80 W, January 1950 - December 2010 (NOAA).
* ``statsmodels.api.datasets.co2``: weekly CO2 mole fraction (ppm) at Mauna Loa,
  March 1958 - December 2001, with missing weeks.  The tool takes monthly means, so the
  weeks are first averaged per calendar month with pandas (a preparation step, not the
  tool); five months have no data and stay missing.

Both load offline from files inside the statsmodels package.  Each series becomes a CF
file with one grid cell on disk and is read back by the tool; the expected numbers are
computed directly from the same values with numpy, pandas, Python's calendar module,
statsmodels and scipy.
"""

from __future__ import annotations

import calendar

import numpy as np
import pandas as pd
import pymannkendall
import pytest
import statsmodels.api as sm
from scipy import stats
from statsmodels.tsa.stattools import acf

from evaluation.io import open_source
from evaluation.timeaxis import season_means
from evaluation.trends import mann_kendall, ols_trend, sens_slope

MONTHS = ("JAN", "FEB", "MAR", "APR", "MAY", "JUN", "JUL", "AUG", "SEP", "OCT", "NOV", "DEC")
NINO_BOX = "box:-10,0,-90,-80"  # the dataset's own region (0-10 S, 90-80 W)


def _monthly_frame() -> pd.DataFrame:
    """El Nino SST as one row per month: year, month, days (Python's calendar), value."""
    wide = sm.datasets.elnino.load_pandas().data
    long = wide.melt(id_vars="YEAR", value_vars=list(MONTHS), var_name="mon", value_name="sst")
    long["year"] = long["YEAR"].astype(int)
    long["month"] = long["mon"].map({m: i + 1 for i, m in enumerate(MONTHS)})
    long = long.sort_values(["year", "month"]).reset_index(drop=True)
    long["days"] = [calendar.monthrange(y, m)[1] for y, m in zip(long["year"], long["month"], strict=True)]
    return long[["year", "month", "days", "sst"]]


def _co2_frame() -> pd.DataFrame:
    weekly = sm.datasets.co2.load_pandas().data["co2"]
    monthly = weekly.resample("MS").mean()  # NaN where a month has no valid week
    out = pd.DataFrame({"year": monthly.index.year, "month": monthly.index.month, "value": monthly.values})
    out["days"] = [calendar.monthrange(y, m)[1] for y, m in zip(out["year"], out["month"], strict=True)]
    return out


def _write_series(nc_file, name: str, frame: pd.DataFrame, column: str, attrs: dict, *, offset: float = 0.0):
    import cftime

    times = [cftime.datetime(y, m, 15, calendar="standard") for y, m in zip(frame["year"], frame["month"], strict=True)]
    grid = {"lat": np.array([-5.0]), "lon": np.array([-85.0]), "lat_bnds": np.array([[-10.0, 0.0]]), "lon_bnds": np.array([[-90.0, -80.0]])}
    values = frame[column].to_numpy(dtype="float64")[:, None, None] + offset
    return nc_file(name, {"v": (values, attrs)}, grid=grid, times=times, calendar="standard")


def _by_pandas(frame: pd.DataFrame, column: str, months: tuple[int, ...]) -> pd.Series:
    """Season means by label year, weighted by month length; DJF takes the previous
    December; a season with a missing month (absent or NaN) is NaN; incomplete seasons at
    the ends of the record are absent."""
    f = frame.copy()
    f = f[f["month"].isin(months)]
    f["label"] = f["year"] + ((f["month"] >= months[0]) & (months[0] > months[-1])).astype(int)
    groups = f.groupby("label")
    complete = groups["month"].count() == len(months)

    def mean(g):
        return np.average(g[column], weights=g["days"]) if g[column].notna().all() else np.nan

    values = groups[["days", column]].apply(mean)
    return values[complete]


def _santer(y: np.ndarray, x: np.ndarray) -> tuple[float, float, float]:
    """OLS slope and its Santer et al. (2000) p-value, with statsmodels and scipy."""
    res = sm.OLS(y, sm.add_constant(x)).fit()
    e = res.resid
    r1 = acf(e, nlags=1, fft=False)[1]
    n_eff = y.size * (1 - r1) / (1 + r1) if r1 > 0 else y.size
    se = np.sqrt(np.sum(e**2) / (n_eff - 2) / np.sum((x - x.mean()) ** 2))
    return float(res.params[1]), float(2 * stats.t.sf(abs(res.params[1] / se), n_eff - 2)), float(res.pvalues[1])


SEASON_MONTHS = {"ANN": tuple(range(1, 13)), "DJF": (12, 1, 2), "JJA": (6, 7, 8), "MAM": (3, 4, 5), "SON": (9, 10, 11), "JAN": (1,)}


@pytest.fixture
def elnino_file(nc_file):
    frame = _monthly_frame()
    path = _write_series(nc_file, "elnino.nc", frame, "sst", {"units": "degC", "standard_name": "sea_surface_temperature"})
    return path, frame


def test_elnino_dataset_is_what_the_tests_assume():
    # Source: statsmodels.api.datasets.elnino (its DESCRLONG): 61 years x 12 months, 1950-2010.
    frame = _monthly_frame()
    assert len(frame) == 61 * 12 and frame["year"].min() == 1950 and frame["year"].max() == 2010
    assert frame["sst"].notna().all() and 15.0 < frame["sst"].mean() < 30.0


@pytest.mark.parametrize("season", sorted(SEASON_MONTHS))
def test_elnino_season_means_match_pandas(elnino_file, season):
    # Source: statsmodels' El Nino SST; season means with numpy.average weighted by month
    # lengths from Python's calendar module, DJF from the previous December; rtol 1e-12.
    path, frame = elnino_file
    got = season_means(open_source(str(path))["v"], season).squeeze(("lat", "lon")).load()
    expected = _by_pandas(frame, "sst", SEASON_MONTHS[season])
    assert got["year"].values.tolist() == expected.index.tolist()
    assert got["year"].values[0] == (1951 if season == "DJF" else 1950)
    np.testing.assert_allclose(got.values, expected.values, rtol=1e-12)


def test_elnino_annual_trend_matches_statsmodels(elnino_file):
    # Source: statsmodels OLS (slope, and its p-value where the residuals' lag-1
    # autocorrelation is negative, as here) and the Santer et al. (2000, J. Geophys.
    # Res. 105(D6)) effective-sample-size test written with statsmodels' acf and
    # scipy.stats.t; rtol 1e-10.
    path, _ = elnino_file
    annual = season_means(open_source(str(path))["v"], "ANN").squeeze(("lat", "lon")).load()
    x, y = annual["year"].values.astype(float), annual.values
    slope, p_santer, p_ols = _santer(y, x)
    got = ols_trend(y, x)
    np.testing.assert_allclose(10 * got.slope, 10 * slope, rtol=1e-10)
    np.testing.assert_allclose(got.pvalue, p_santer, rtol=1e-10)
    assert got.r1 < 0 and got.pvalue == pytest.approx(p_ols, rel=1e-10)  # n_eff = n here
    # the non-parametric pair on the same numbers: scipy.stats.theilslopes and pymannkendall
    np.testing.assert_allclose(sens_slope(y, x), stats.theilslopes(y, x).slope, rtol=1e-12)
    mk, ref = mann_kendall(y), pymannkendall.original_test(y)
    np.testing.assert_allclose([mk.s, mk.var_s, mk.z, mk.pvalue], [ref.s, ref.var_s, ref.z, ref.p], rtol=1e-10)


def test_elnino_through_the_command_line(nc_file, elnino_file, score_cli):
    # Source: statsmodels' El Nino SST; regional season means with numpy/pandas, trends
    # per decade with statsmodels OLS, p-values with the Santer et al. (2000) test written
    # here; the run is the same record stored in kelvin (pint: T[K] = T[degC] + 273.15),
    # so it must score as the reference itself; rtol 1e-9.
    path, frame = elnino_file
    kelvin = _write_series(nc_file, "elnino_k.nc", frame, "sst", {"units": "K", "standard_name": "sea_surface_temperature"}, offset=273.15)
    table = score_cli(["--reference", f"sst-obs={path}", "--model", f"sst-in-k={kelvin}", "--variable", "sea_surface_temperature",
                       "--region", NINO_BOX, "--region", "global", "--season", "ANN", "--season", "DJF", "--season", "JJA"])
    assert set(table["period"]) == {"1950-2010"}
    assert set(table.loc[table["metric"] == "ref_trend", "units"]) == {"K/decade"}
    for (region, season), rows in table.groupby(["region", "season"]):
        v = dict(zip(rows["metric"], rows["value"], strict=True))
        expected = _by_pandas(frame, "sst", SEASON_MONTHS[season])
        x, y = expected.index.to_numpy(dtype=float), expected.to_numpy()
        slope, p_santer, _ = _santer(y, x)
        np.testing.assert_allclose(v["ref_mean"], y.mean(), rtol=1e-12, err_msg=f"{region} {season}")
        np.testing.assert_allclose(v["ref_trend"], 10 * slope, rtol=1e-9, err_msg=f"{region} {season}")
        np.testing.assert_allclose(v["ref_trend_pvalue"], p_santer, rtol=1e-9, err_msg=f"{region} {season}")
        np.testing.assert_allclose(v["trend"], 10 * slope, rtol=1e-9, err_msg=f"{region} {season}")
        assert abs(v["bias"]) < 1e-9 and v["rmse"] < 1e-9
        np.testing.assert_allclose(v["iav_ratio"], 1.0, rtol=1e-9)


def test_co2_season_means_and_gaps_match_pandas(nc_file):
    # Source: statsmodels' Mauna Loa CO2 (weekly, averaged per month with pandas); season
    # means by numpy.average with month lengths from Python's calendar module; a season
    # with a month without data (1964: February-April) is missing, not a partial mean;
    # rtol 1e-12.
    frame = _co2_frame()
    assert frame["value"].isna().sum() == 5  # June and October 1958, February-April 1964
    path = _write_series(nc_file, "co2.nc", frame, "value", {"units": "ppm", "long_name": "CO2 mole fraction"})
    da = open_source(str(path))["v"]
    for season in ("ANN", "DJF", "MAM", "JJA"):
        got = season_means(da, season).squeeze(("lat", "lon")).load()
        expected = _by_pandas(frame, "value", SEASON_MONTHS[season])
        assert got["year"].values.tolist() == expected.index.tolist(), season
        np.testing.assert_allclose(got.values, expected.values, rtol=1e-12, err_msg=season)
    annual = season_means(da, "ANN").squeeze(("lat", "lon")).load()
    assert annual["year"].values[0] == 1959  # 1958 starts in March
    assert np.isnan(annual.sel(year=1964).item())


def test_co2_trend_and_santer_pvalue_match_statsmodels(nc_file, score_cli):
    # Source: statsmodels OLS on the annual means with the missing year dropped
    # (missing="drop"), and the Santer et al. (2000) test with statsmodels' acf and
    # scipy.stats.t (strongly autocorrelated residuals: the rise accelerates); rtol 1e-10
    # for the functions, 1e-9 through the command line.
    frame = _co2_frame()
    path = _write_series(nc_file, "co2.nc", frame, "value", {"units": "ppm", "long_name": "CO2 mole fraction"})
    annual = season_means(open_source(str(path))["v"], "ANN").squeeze(("lat", "lon")).load()
    x, y = annual["year"].values.astype(float), annual.values
    res = sm.OLS(y, sm.add_constant(x), missing="drop").fit()
    keep = np.isfinite(y)
    slope, p_santer, _ = _santer(y[keep], x[keep])
    got = ols_trend(y, x)
    np.testing.assert_allclose(got.slope, res.params[1], rtol=1e-10)
    np.testing.assert_allclose(got.slope, slope, rtol=1e-10)
    assert got.r1 > 0.5 and np.isfinite(p_santer)
    np.testing.assert_allclose(got.pvalue, p_santer, rtol=1e-10)
    assert got.pvalue > res.pvalues[1]  # autocorrelation widens the test (Santer et al. 2000)

    # the same through the command line, on the complete years after the 1964 gap
    table = score_cli(["--reference", f"co2-obs={path}", "--model", f"co2-copy={path}", "--variable", "v", "--period", "1965-2001"])
    v = dict(zip(table["metric"], table["value"], strict=True))
    sel = (x >= 1965) & (x <= 2001)
    slope, p_santer, _ = _santer(y[sel], x[sel])
    np.testing.assert_allclose(v["ref_trend"], 10 * slope, rtol=1e-9)
    np.testing.assert_allclose(v["ref_trend_pvalue"], p_santer, rtol=1e-9)
    np.testing.assert_allclose(v["ref_mean"], y[sel].mean(), rtol=1e-12)
