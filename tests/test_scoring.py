"""Tests of evaluation.scoring.Comparison on real NetCDF files, every score recomputed here
from the raw file contents with numpy/scipy (no call into the package for the expectation)."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from cfdata import exact_area, hand_season_means, naive_pattern_stats, read_monthly, write_cf
from scipy import stats

from evaluation.errors import InputError
from evaluation.scoring import TIDY_COLUMNS, Comparison, Source
from evaluation.timeaxis import Period


def noisy(seed: float):
    """A field with year-to-year noise so that trends and interannual variability are not trivial."""

    def f(lat, lon, year, month):
        phi, lam = np.deg2rad(lat), np.deg2rad(lon)
        yearly = 0.4 * np.sin(12.9898 * year + seed) + 0.2 * np.sin(3 * phi + 0.7 * year + seed) * np.cos(lam)
        return (
            255.0
            + 30.0 * np.cos(phi) ** 2
            + 2.0 * np.sin(2 * lam + seed) * np.cos(phi)
            - 10.0 * np.sin(phi) * np.cos(2 * np.pi * (month - 1) / 12.0)
            + (0.02 + 0.01 * seed) * (year - 2000)
            + yearly
        )

    return f


def src(name, path, role="model"):
    return Source(name=name, role=role, paths=[str(path)])


def compare(ref_path, models: dict, variable="tas", **kw) -> Comparison:
    return Comparison(reference=src("ref", ref_path, "reference"), models=[src(k, v) for k, v in models.items()], variable=variable, **kw)


def value(table: pd.DataFrame, metric: str, *, model=None, region="global", season="ANN") -> float:
    sel = table[(table.metric == metric) & (table.region == region) & (table.season == season)]
    if model is not None:
        sel = sel[sel.model == model]
    assert len(sel) == 1, (metric, model, region, season)
    return float(sel.value.iloc[0])


def santer_trend(y: np.ndarray, x: np.ndarray) -> tuple[float, float]:
    """OLS slope and its p-value with the lag-1 effective sample size of Santer et al. (2000),
    J. Geophys. Res. 105(D6), eqs. (3)-(6): n_e = n (1 - r1)/(1 + r1), t-test with n_e - 2 dof."""
    b, a = np.polyfit(x, y, 1)
    e = y - (a + b * x)
    d = e - e.mean()
    r1 = np.sum(d[:-1] * d[1:]) / np.sum(d * d)
    n = y.size
    ne = n * (1 - r1) / (1 + r1) if r1 > 0 else n
    se = np.sqrt(np.sum(e * e) / (ne - 2) / np.sum((x - x.mean()) ** 2))
    return b, 2 * stats.t.sf(abs(b / se), ne - 2)


def detrended(y: np.ndarray, x: np.ndarray) -> np.ndarray:
    """Residuals of the least-squares line (numpy.polyfit)."""
    return y - np.polyval(np.polyfit(x, y, 1), x)


def hand_scores(ref_path, model_paths: dict, *, variable="tas", season="ANN", first, last, frac=None, scale=1.0):
    """Every metric of the tidy table for runs on the reference's (canonical) grid.

    ``frac`` is the region's fraction per cell; ``scale`` converts the runs' stored units.
    """
    r_vals, r_steps, r_cal, r_ds = read_monthly(ref_path, variable)
    area = exact_area(r_ds["lat_bnds"].values, r_ds["lon_bnds"].values)
    w = area * (1.0 if frac is None else frac)
    r_years = hand_season_means(r_vals, r_steps, r_cal, season, first, last)
    out = {}
    for name, path in model_paths.items():
        m_vals, m_steps, m_cal, _ = read_monthly(path, variable)
        m_years = hand_season_means(m_vals * scale, m_steps, m_cal, season, first, last)
        years = sorted(set(r_years) & set(m_years))
        m_clim = np.mean([m_years[y] for y in years], axis=0)
        r_clim = np.mean([r_years[y] for y in years], axis=0)
        s = naive_pattern_stats(m_clim, r_clim, w)
        mask = np.isfinite(m_clim) & np.isfinite(r_clim) & (w > 0)
        ms = np.array([np.average(m_years[y][mask], weights=w[mask]) for y in years])
        rs = np.array([np.average(r_years[y][mask], weights=w[mask]) for y in years])
        x = np.array(years, dtype=float)
        if x.size >= 3:
            s["trend"], s["trend_pvalue"] = (v * k for v, k in zip(santer_trend(ms, x), (10.0, 1.0), strict=True))
            s["ref_trend"], s["ref_trend_pvalue"] = (v * k for v, k in zip(santer_trend(rs, x), (10.0, 1.0), strict=True))
            s["iav_ratio"] = np.std(detrended(ms, x), ddof=1) / np.std(detrended(rs, x), ddof=1)
        out[name] = s
    med = np.median([s["rmse"] for s in out.values()])
    for s in out.values():
        s["rel_error"] = (s["rmse"] - med) / med  # Gleckler et al. (2008)
    return out


@pytest.fixture(scope="module")
def files(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("scoring")
    common = dict(dlat=6.0, start_year=1995, years=8, dtype="float64")
    paths = {
        "ref": write_cf(tmp / "ref.nc", field=noisy(0.0), **common),
        "a": write_cf(tmp / "a.nc", field=noisy(1.0), offset=0.8, **common),
        "b": write_cf(tmp / "b.nc", field=noisy(2.0), offset=-0.3, scale=1.01, **common),
        "c": write_cf(tmp / "c.nc", field=noisy(3.0), offset=1.5, **common),
    }
    # the same runs stored differently
    paths["a_odd"] = write_cf(tmp / "a_odd.nc", field=noisy(1.0), offset=0.8, lat_descending=True, lon_0_360=True, names={"lat": "y", "lon": "x", "time": "t"}, **common)
    paths["a_degc"] = write_cf(tmp / "a_degc.nc", field=noisy(1.0), offset=0.8 - 273.15, units="degC", **common)
    paths["a_nobnds"] = write_cf(tmp / "a_nobnds.nc", field=noisy(1.0), offset=0.8, bounds=False, **common)
    return paths


@pytest.fixture(scope="module")
def three_runs(files):
    cmp = compare(files["ref"], {"a": files["a"], "b": files["b"], "c": files["c"]})
    regions = ["global", "tropics", "box:-10,10,160,-150"]
    return cmp, cmp.scores(regions=regions, seasons=["ANN", "JJA"])


# ---------------------------------------------------------------------------- the numbers


@pytest.mark.parametrize("season", ["ANN", "JJA"])
def test_every_metric_matches_an_independent_computation(files, three_runs, season):
    cmp, table = three_runs
    assert cmp.period == Period(1995, 2002)  # the overlap: WMO 1991-2020 is not covered
    expected = hand_scores(files["ref"], {k: files[k] for k in "abc"}, season=season, first=1995, last=2002)
    for name, metrics in expected.items():
        for metric, want in metrics.items():
            got = value(table, metric, model=name, season=season)
            assert got == pytest.approx(want, rel=1e-9, abs=1e-12), (name, metric)
    assert set(table.metric) == set(expected["a"]) | {"trend", "ref_trend", "trend_pvalue", "ref_trend_pvalue", "iav_ratio",
                                                     # significance (tests/test_significance_maps.py, tests/validation/test_bootstrap_references.py)
                                                     "bias_signif_area", "rmse_diff_lo", "rmse_diff_hi", "abs_bias_diff_lo", "abs_bias_diff_hi"}


def test_regional_scores_use_fractional_weights(files, three_runs):
    _, table = three_runs
    r_ds = read_monthly(files["ref"], "tas")[3]
    lat_b, lon_b = r_ds["lat_bnds"].values, r_ds["lon_bnds"].values
    mu = np.sin(np.deg2rad(lat_b))
    # tropics: equal-area share of each row inside 30°S-30°N (the 6° grid has edges at ±30)
    lat_frac = np.clip(np.minimum(mu[:, 1], 0.5) - np.maximum(mu[:, 0], -0.5), 0, None) / (mu[:, 1] - mu[:, 0])
    frac = lat_frac[:, None] * np.ones(lon_b.shape[0])[None, :]
    expected = hand_scores(files["ref"], {k: files[k] for k in "abc"}, first=1995, last=2002, frac=frac)
    for metric in ("mean", "ref_mean", "rmse", "corr", "trend"):
        assert value(table, metric, model="b", region="tropics") == pytest.approx(expected["b"][metric], rel=1e-9)
    # the dateline box: longitudes 160°E..180° and 180°..150°W, 10°S..10°N, cut through cells
    lon_frac = (np.clip(np.minimum(lon_b[:, 1], 180) - np.maximum(lon_b[:, 0], 160), 0, None) + np.clip(np.minimum(lon_b[:, 1], -150) - np.maximum(lon_b[:, 0], -180), 0, None)) / 6.0
    s10 = np.sin(np.deg2rad(10.0))
    lat_frac = np.clip(np.minimum(mu[:, 1], s10) - np.maximum(mu[:, 0], -s10), 0, None) / (mu[:, 1] - mu[:, 0])
    assert 0 < lat_frac.max() and np.any((lat_frac > 0) & (lat_frac < 1))  # partial rows exist
    expected = hand_scores(files["ref"], {k: files[k] for k in "abc"}, first=1995, last=2002, frac=lat_frac[:, None] * lon_frac[None, :])
    for metric in ("mean", "ref_mean", "bias", "crmse", "std_ratio"):
        assert value(table, metric, model="c", region="box:-10,10,160,-150") == pytest.approx(expected["c"][metric], rel=1e-9)


def test_table_form(three_runs):
    cmp, table = three_runs
    assert list(table.columns) == list(TIDY_COLUMNS) == ["model", "reference", "variable", "level", "region", "season", "period", "metric", "value", "units"]
    assert len(table) == 3 * 3 * 2 * 19  # runs × regions × seasons × metrics
    assert set(table.period) == {"1995-2002"}
    units = dict(zip(table.metric, table.units, strict=False))
    assert units["trend"] == "K/decade" and units["bias"] == "K" and units["corr"] == "1" and units["rel_error"] == "1"
    assert table.groupby(["model", "region", "season"]).size().eq(19).all()


def test_rel_error_median_is_zero(three_runs):
    _, table = three_runs
    rel = table[table.metric == "rel_error"].groupby(["region", "season"]).value.median()
    # Gleckler et al. (2008): the median run has relative error 0
    np.testing.assert_allclose(rel.values, 0.0, atol=1e-12)


# ---------------------------------------------------------------------------- same numbers however stored


@pytest.mark.parametrize("variant", ["a_odd", "a_degc", "a_nobnds"])
def test_storage_does_not_change_the_scores(files, variant):
    base = compare(files["ref"], {"a": files["a"]}).scores(regions=["global", "box:-10,10,160,-150"])
    other = compare(files["ref"], {"a": files[variant]}).scores(regions=["global", "box:-10,10,160,-150"])
    # descending latitude / 0…360 / odd names, degC instead of K, inferred instead of stored bounds
    np.testing.assert_allclose(other.value.values, base.value.values, rtol=1e-9, atol=1e-9)
    assert (other.units.values == base.units.values).all()


def test_precipitation_in_mass_flux_and_mm_per_day(tmp_path):
    def pr(lat, lon, year, month):
        return 3.0 + 2.0 * np.cos(np.deg2rad(lat)) ** 4 + 0.5 * np.sin(np.deg2rad(lon)) + 0.1 * np.sin(year + month)

    common = dict(dlat=10.0, start_year=2000, years=3, dtype="float64", variable="pr", standard_name="precipitation_flux")
    ref = write_cf(tmp_path / "ref.nc", field=pr, scale=1 / 86400.0, units="kg m-2 s-1", **common)
    run = write_cf(tmp_path / "run.nc", field=pr, offset=0.25, units="mm day-1", **common)
    cmp = compare(ref, {"run": run}, variable="pr")
    assert cmp.units == "mm day-1"
    table = cmp.scores()
    # 1 kg m-2 s-1 = 86 400 mm day-1 with water of 1000 kg m-3 (common practice)
    expected = hand_scores(ref, {"run": run}, variable="pr", first=2000, last=2002)["run"]
    ref_scale = 86400.0
    assert value(table, "bias") == pytest.approx(0.25, rel=1e-9)
    assert value(table, "ref_mean") == pytest.approx(expected["ref_mean"] * ref_scale, rel=1e-9)
    assert value(table, "mean") == pytest.approx(expected["mean"], rel=1e-9)
    assert table.loc[table.metric == "trend", "units"].item() == "mm day-1/decade"


def test_incompatible_units_are_an_input_error(files, tmp_path):
    # the file also says standard_name = air_temperature: the units contradict it first
    bad = write_cf(tmp_path / "flux.nc", units="W m-2", dlat=6.0, start_year=1995, years=8)
    with pytest.raises(InputError, match="cannot be converted|energy flux, but standard_name 'air_temperature'") as err:
        compare(files["ref"], {"flux": bad})
    assert err.value.file == str(bad) and "'flux'" in err.value.message  # the file to fix, and the source


def test_different_grids_compare_on_the_reference_grid(files, tmp_path):
    run = write_cf(tmp_path / "coarse.nc", field=noisy(1.0), offset=0.8, dlat=7.5, start_year=1995, years=8, dtype="float64")
    cmp = compare(files["ref"], {"coarse": run})
    table = cmp.scores()
    m_vals, steps, cal, m_ds = read_monthly(run, "tas")
    native = np.mean(list(hand_season_means(m_vals, steps, cal, "ANN", 1995, 2002).values()), axis=0)
    area = exact_area(m_ds["lat_bnds"].values, m_ds["lon_bnds"].values)
    # conservative remapping keeps the area-weighted global mean (Jones 1999)
    assert value(table, "mean") == pytest.approx(np.average(native, weights=area), rel=1e-12)
    clim = cmp.climatology("coarse", "ANN")
    assert clim.sizes == {"lat": 30, "lon": 60}
    assert value(table, "corr") > 0.99 and abs(value(table, "bias") - 0.8) < 0.1
    bil = compare(files["ref"], {"coarse": run}, regrid="bilinear").scores()
    assert value(bil, "mean") == pytest.approx(value(table, "mean"), rel=1e-3)
    assert value(bil, "mean") != value(table, "mean")


# ---------------------------------------------------------------------------- masks


def _hole(lat, lon):
    return (lat > 20) & (lat < 50) & (lon > -60) & (lon < 30)


def test_a_cell_missing_in_the_run_is_left_out_of_the_reference_too(files, tmp_path):
    run = write_cf(tmp_path / "holes.nc", field=noisy(1.0), offset=0.8, dlat=6.0, start_year=1995, years=8, dtype="float64", nan_mask=_hole)
    cmp = compare(files["ref"], {"holes": run})
    table = cmp.scores()
    expected = hand_scores(files["ref"], {"holes": run}, first=1995, last=2002)["holes"]
    for metric in ("mean", "ref_mean", "bias", "rmse", "crmse", "corr", "std_ratio", "trend", "ref_trend", "iav_ratio"):
        assert value(table, metric) == pytest.approx(expected[metric], rel=1e-9), metric
    full = compare(files["ref"], {"a": files["a"]}).scores()
    assert value(table, "ref_mean") != pytest.approx(value(full, "ref_mean"), rel=1e-9)
    # fields: the run's climatology and the difference carry the common mask
    assert bool(np.isnan(cmp.difference("holes", "ANN").sel(lat=33.0, lon=-3.0)))
    assert bool(np.isfinite(cmp.climatology("ref", "ANN").sel(lat=33.0, lon=-3.0)))


def test_a_selection_with_no_valid_cell_is_an_input_error(files, tmp_path):
    run = write_cf(tmp_path / "pacific_nan.nc", dlat=6.0, start_year=1995, years=8, nan_mask=lambda la, lo: (np.abs(la) < 20) & ((lo > 150) | (lo < -140)))
    cmp = compare(files["ref"], {"nan": run})
    assert np.isfinite(value(cmp.scores(), "mean"))
    with pytest.raises(InputError, match="no valid cell"):
        cmp.scores(regions=["box:-10,10,160,-150"])


# ---------------------------------------------------------------------------- calendars and seasons


def test_360_day_run_against_noleap_reference(tmp_path):
    common = dict(dlat=10.0, start_year=1990, years=4, dtype="float64")
    ref = write_cf(tmp_path / "noleap.nc", calendar="noleap", field=noisy(0.0), **common)
    run = write_cf(tmp_path / "d360.nc", calendar="360_day", field=noisy(1.0), **common)
    table = compare(ref, {"run": run}).scores(seasons=["ANN", "DJF"])
    for season in ("ANN", "DJF"):
        expected = hand_scores(ref, {"run": run}, season=season, first=1990, last=1993)["run"]
        for metric in ("mean", "ref_mean", "rmse", "corr"):
            assert value(table, metric, season=season) == pytest.approx(expected[metric], rel=1e-10), (season, metric)
    # the 360_day annual mean is the plain mean of its months (every month has 30 days)
    vals, _, _, _ = read_monthly(run, "tas")
    ds = read_monthly(ref, "tas")[3]
    area = exact_area(ds["lat_bnds"].values, ds["lon_bnds"].values)
    assert value(table, "mean") == pytest.approx(np.average(vals.mean(axis=0), weights=area), rel=1e-10)


def test_djf_takes_the_previous_december(tmp_path):
    # the value of each month identifies it: 100·year + month (plus a fixed spatial pattern)
    def code(lat, lon, year, month):
        return 1e-3 * (100 * year + month) + np.cos(np.deg2rad(lat))

    common = dict(dlat=10.0, dtype="float64", field=code)
    ref = write_cf(tmp_path / "ref.nc", start_year=1990, years=3, **common)
    run = write_cf(tmp_path / "run.nc", start_year=1990, years=3, **common, offset=0.5)
    cmp = compare(ref, {"run": run}, period="1991-1992")
    series = cmp.regional_series("ref", "global", "DJF")
    np.testing.assert_array_equal(series["year"].values, [1991, 1992])
    ds = read_monthly(ref, "tas")[3]
    area = exact_area(ds["lat_bnds"].values, ds["lon_bnds"].values)
    pattern = np.average(np.cos(np.deg2rad(ds["lat"].values))[:, None] * np.ones((1, ds.sizes["lon"])), weights=area)
    for year, got in zip((1991, 1992), series.values, strict=True):
        parts = [(year - 1, 12, 31), (year, 1, 31), (year, 2, 29 if year % 4 == 0 else 28)]
        code_mean = sum(d * 1e-3 * (100 * y + m) for y, m, d in parts) / sum(d for *_, d in parts)
        assert got == pytest.approx(code_mean + pattern, rel=1e-12)


def test_djf_climatologies_cover_the_same_years_in_both_sources(tmp_path):
    # the run starts in December 1994, the reference in January 1995: DJF 1995 exists in
    # the run only and must enter neither climatology (else a trend would show as bias)
    common = dict(dlat=10.0, dtype="float64", field=noisy(0.0))
    ref = write_cf(tmp_path / "ref.nc", start_year=1995, years=6, **common)
    run = write_cf(tmp_path / "run.nc", months=[(1994, 12)] + [(y, m) for y in range(1995, 2001) for m in range(1, 13)], offset=0.5, **common)
    table = compare(ref, {"run": run}).scores(seasons=["DJF"])
    expected = hand_scores(ref, {"run": run}, season="DJF", first=1995, last=2000)["run"]  # common years only
    assert value(table, "bias", season="DJF") == pytest.approx(0.5, rel=1e-10)
    for metric in ("mean", "ref_mean", "rmse", "trend", "ref_trend"):
        assert value(table, metric, season="DJF") == pytest.approx(expected[metric], rel=1e-10), metric


@pytest.mark.parametrize("season", ["JAN", "SON", "DEC"])
def test_single_months_and_other_seasons(files, season):
    table = compare(files["ref"], {"a": files["a"], "b": files["b"]}).scores(seasons=[season])
    expected = hand_scores(files["ref"], {"a": files["a"], "b": files["b"]}, season=season, first=1995, last=2002)
    for metric in ("mean", "ref_mean", "rmse", "corr", "trend", "iav_ratio", "rel_error"):
        assert value(table, metric, model="b", season=season) == pytest.approx(expected["b"][metric], rel=1e-9), metric


def test_a_reference_in_celsius_sets_the_units(files, tmp_path):
    ref_c = write_cf(tmp_path / "ref_c.nc", field=noisy(0.0), offset=-273.15, units="degC", dlat=6.0, start_year=1995, years=8, dtype="float64")
    cmp = compare(ref_c, {"a": files["a"]})
    assert cmp.units == "degC"
    table = cmp.scores()
    kelvin = compare(files["ref"], {"a": files["a"]}).scores()
    # SI: t/°C = T/K − 273.15; differences and trends are the same in both
    assert value(table, "mean") == pytest.approx(value(kelvin, "mean") - 273.15, abs=1e-9)
    for metric in ("bias", "rmse", "crmse", "corr", "trend", "trend_pvalue"):
        assert value(table, metric) == pytest.approx(value(kelvin, metric), rel=1e-8, abs=1e-10), metric
    units = dict(zip(table.metric, table.units, strict=True))
    assert units["mean"] == "degC" and units["trend"] == "K/decade"


def test_incomplete_first_djf_is_dropped_and_single_year_works(tmp_path):
    common = dict(dlat=10.0, dtype="float64", field=noisy(0.0))
    ref = write_cf(tmp_path / "ref.nc", start_year=1995, years=1, **common)
    run = write_cf(tmp_path / "run.nc", start_year=1995, years=1, offset=1.0, **common)
    cmp = compare(ref, {"run": run})
    assert cmp.period == Period(1995, 1995)
    table = cmp.scores()
    assert value(table, "bias") == pytest.approx(1.0, rel=1e-10)
    for metric in ("trend", "ref_trend", "trend_pvalue", "iav_ratio"):
        assert np.isnan(value(table, metric))  # one year: no trend, no interannual spread
    with pytest.raises(InputError, match="no complete DJF"):
        cmp.scores(seasons=["DJF"])  # December 1994 is not in the files


# ---------------------------------------------------------------------------- periods


@pytest.fixture(scope="module")
def long_files(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("long")
    common = dict(dlat=30.0, dtype="float64")
    return {
        "ref_long": write_cf(tmp / "ref_long.nc", start_year=1989, years=33, field=noisy(0.0), **common),
        "run_long": write_cf(tmp / "run_long.nc", start_year=1985, years=40, field=noisy(1.0), **common),
        "run_short": write_cf(tmp / "run_short.nc", start_year=1993, years=7, field=noisy(2.0), **common),
        "run_old": write_cf(tmp / "run_old.nc", start_year=1950, years=5, field=noisy(3.0), **common),
    }


def test_default_period_is_1991_2020_when_every_source_covers_it(long_files):
    # WMO-No. 1203 (2017): the standard normal 1991-2020
    cmp = compare(long_files["ref_long"], {"run": long_files["run_long"]})
    assert cmp.period == Period(1991, 2020)
    assert set(cmp.scores().period) == {"1991-2020"}


def test_default_period_is_the_overlap_otherwise(long_files):
    cmp = compare(long_files["ref_long"], {"run": long_files["run_long"], "short": long_files["run_short"]})
    assert cmp.period == Period(1993, 1999)


def test_explicit_period_not_covered_is_an_input_error(long_files):
    with pytest.raises(InputError, match="does not cover the period 1990-2000") as err:
        compare(long_files["ref_long"], {"short": long_files["run_short"]}, period="1990-2000")
    assert err.value.file == str(long_files["run_short"]) and "'short'" in err.value.message and "1993-1999" in err.value.message


def test_periods_that_do_not_overlap_are_an_input_error(long_files):
    with pytest.raises(InputError, match="share no complete year"):
        compare(long_files["ref_long"], {"old": long_files["run_old"]})


def test_explicit_period_is_used(long_files):
    cmp = compare(long_files["ref_long"], {"run": long_files["run_long"]}, period="2001-2010")
    series = cmp.regional_series("run", "global", "ANN")
    np.testing.assert_array_equal(series["year"].values, np.arange(2001, 2011))


# ---------------------------------------------------------------------------- land and ocean


def test_land_and_ocean_from_the_files_land_fraction_in_percent(files, tmp_path):
    def land(lat, lon):
        return np.clip((lat + 30.0) / 60.0, 0.0, 1.0) * (lon > 0)

    ref = write_cf(tmp_path / "ref_sftlf.nc", field=noisy(0.0), dlat=6.0, start_year=1995, years=8, dtype="float64", land_fraction=land, land_units="%")
    cmp = compare(ref, {"a": files["a"]})
    table = cmp.scores(regions=["land", "ocean"])
    ds = read_monthly(ref, "tas")[3]
    frac = ds["sftlf"].values.astype("float64") / 100.0  # percent (CF units '%')
    for region, f in (("land", frac), ("ocean", 1.0 - frac)):
        expected = hand_scores(ref, {"a": files["a"]}, first=1995, last=2002, frac=f)["a"]
        for metric in ("mean", "ref_mean", "rmse", "corr"):
            assert value(table, metric, region=region) == pytest.approx(expected[metric], rel=1e-9), (region, metric)


def test_land_without_a_land_fraction_uses_the_bundled_mask(tmp_path):
    from importlib import resources

    import xarray as xr

    common = dict(dlat=1.0, start_year=2000, years=1, dtype="float32")
    ref = write_cf(tmp_path / "ref1.nc", field=noisy(0.0), **common)
    run = write_cf(tmp_path / "run1.nc", field=noisy(1.0), **common)
    table = compare(ref, {"run": run}).scores(regions=["land"])
    with resources.as_file(resources.files("evaluation") / "data" / "land_fraction_1deg.nc") as p, xr.open_dataset(p) as lf:
        frac = lf["sftlf"].values.astype("float64")  # same 1° grid, latitude ascending, -180..180
        assert lf["lat"].values[0] < 0 and lf["lon"].values[0] < 0
    expected = hand_scores(ref, {"run": run}, first=2000, last=2000, frac=frac)["run"]
    assert value(table, "ref_mean", region="land") == pytest.approx(expected["ref_mean"], rel=1e-6)


def test_the_references_cell_measures_weight_the_scores(files, tmp_path):
    r_ds = read_monthly(files["ref"], "tas")[3]
    geometric = exact_area(r_ds["lat_bnds"].values, r_ds["lon_bnds"].values)
    lon = r_ds["lon"].values
    stored = geometric * (1.0 + 0.5 * np.sin(2 * np.deg2rad(lon)))[None, :]  # deliberately not geometric
    ref = write_cf(tmp_path / "ref_area.nc", field=noisy(0.0), dlat=6.0, start_year=1995, years=8, dtype="float64", cell_area=stored)
    table = compare(ref, {"a": files["a"]}).scores()
    r_vals, steps, cal, _ = read_monthly(ref, "tas")
    clim = np.mean(list(hand_season_means(r_vals, steps, cal, "ANN", 1995, 2002).values()), axis=0)
    assert value(table, "ref_mean") == pytest.approx(np.average(clim, weights=stored), rel=1e-12)
    assert value(table, "ref_mean") != pytest.approx(np.average(clim, weights=geometric), rel=1e-9)


# ---------------------------------------------------------------------------- fields


def test_fields(files, three_runs):
    cmp, _ = three_runs
    r_vals, steps, cal, ds = read_monthly(files["ref"], "tas")
    a_vals = read_monthly(files["a"], "tas")[0]
    r = np.mean(list(hand_season_means(r_vals, steps, cal, "ANN", 1995, 2002).values()), axis=0)
    a_years = hand_season_means(a_vals, steps, cal, "ANN", 1995, 2002)
    a = np.mean(list(a_years.values()), axis=0)
    np.testing.assert_allclose(cmp.climatology("a", "ANN").values, a, rtol=1e-12)
    np.testing.assert_allclose(cmp.difference("a", "ANN").values, a - r, rtol=1e-9, atol=1e-10)
    np.testing.assert_allclose(cmp.zonal_mean("a", "ANN").values, a.mean(axis=1), rtol=1e-12)
    x = np.array(sorted(a_years), dtype=float)
    stack = np.stack([a_years[y] for y in sorted(a_years)])
    slope = np.polyfit(x, stack.reshape(x.size, -1), 1)[0].reshape(a.shape) * 10.0  # per decade
    np.testing.assert_allclose(cmp.trend_map("a", "ANN").values, slope, rtol=1e-8, atol=1e-10)
    assert cmp.trend_map("a", "ANN").attrs["units"] == "K/decade"


def test_seasonal_cycle(files, three_runs):
    cmp, _ = three_runs
    vals, steps, _, ds = read_monthly(files["ref"], "tas")
    area = exact_area(ds["lat_bnds"].values, ds["lon_bnds"].values)
    got = cmp.seasonal_cycle("ref", "global").values
    for month in range(1, 13):
        idx = [i for i, (y, m) in enumerate(steps) if m == month and 1995 <= y <= 2002]
        assert got[month - 1] == pytest.approx(np.average(vals[idx].mean(axis=0), weights=area), rel=1e-12)


# ---------------------------------------------------------------------------- laziness and other errors


class _FileReads:
    """Counts reads of one variable's values from NetCDF files, however they are made
    (xarray's lazy indexing without dask, or dask tasks): every read goes through
    xarray's netCDF4 array wrapper."""

    def __init__(self, monkeypatch, variable: str) -> None:
        from xarray.backends.netCDF4_ import NetCDF4ArrayWrapper

        self.total = 0
        original = NetCDF4ArrayWrapper._getitem
        counter = self

        def counted(wrapper, key):
            if wrapper.variable_name == variable:
                counter.total += 1
            return original(wrapper, key)

        monkeypatch.setattr(NetCDF4ArrayWrapper, "_getitem", counted)


def test_comparison_stays_lazy_until_prepare(files, monkeypatch):
    # grid metadata (bounds) may be read when the sources are opened; the monthly data may not.
    # These one-file sources fit in memory: opened without dask, each read once, whole.
    reads = _FileReads(monkeypatch, "tas")
    cmp = compare(files["ref"], {"a": files["a"], "b": files["b"]})
    assert reads.total == 0
    cmp.prepare(["ANN", "DJF"])  # one read per source (3 sources) for all its seasons
    assert reads.total == 3
    cmp.prepare(["DJF", "ANN"])  # already reduced: nothing read again
    table = cmp.scores(seasons=["ANN", "DJF"])  # everything already reduced: nothing read
    assert reads.total == 3
    assert len(table) == 2 * 2 * 19


def test_sources_of_several_files_are_reduced_in_one_dask_pass_each(tmp_path, raise_if_computed):
    # several files per source are joined lazily with dask (copying them into memory at
    # open would hold every source at once): lazy until prepare, then one pass per source
    common = dict(dlat=6.0, dtype="float64", years=4)
    parts = {name: [write_cf(tmp_path / f"{name}{i}.nc", field=noisy(seed), start_year=1995 + 4 * i, **common) for i in (0, 1)]
             for name, seed in (("ref", 0.0), ("a", 1.0), ("b", 2.0))}
    sources = {name: Source(name=name, role="reference" if name == "ref" else "model", paths=[str(f) for f in fs]) for name, fs in parts.items()}
    with raise_if_computed(max_computes=0, touching=("tas",)):
        cmp = Comparison(reference=sources["ref"], models=[sources["a"], sources["b"]], variable="tas")
    with raise_if_computed(max_computes=3, touching=("tas",)) as counter:
        cmp.prepare(["ANN", "DJF"])
    assert counter.total == 3
    with raise_if_computed(max_computes=0, touching=("tas",)):
        cmp.prepare(["DJF", "ANN"])
    # the same values as the sources written as one file each (read without dask)
    whole = {name: write_cf(tmp_path / f"{name}.nc", field=noisy(seed), start_year=1995, **{**common, "years": 8})
             for name, seed in (("ref", 0.0), ("a", 1.0), ("b", 2.0))}
    one_file = compare(whole["ref"], {"a": whole["a"], "b": whole["b"]}).scores(seasons=["ANN", "DJF"])
    np.testing.assert_allclose(cmp.scores(seasons=["ANN", "DJF"]).value.values, one_file.value.values, rtol=1e-12, equal_nan=True)


def test_comparison_with_a_land_fraction_stays_lazy(tmp_path, monkeypatch):
    ref = write_cf(tmp_path / "ref.nc", dlat=10.0, years=2, land_fraction=lambda la, lo: (la > 0) * 1.0)
    run = write_cf(tmp_path / "run.nc", dlat=10.0, years=2, offset=1.0)
    reads = _FileReads(monkeypatch, "tas")
    cmp = compare(ref, {"run": run})
    assert reads.total == 0
    assert value(cmp.scores(regions=["land"]), "bias", region="land") == pytest.approx(1.0, rel=1e-5)


def test_a_source_in_other_units_is_not_read_before_prepare(files, monkeypatch):
    # converting degC to K at once would read the whole source when the comparison is made
    # (every source in memory together); the units are checked then, the values converted when read
    reads = _FileReads(monkeypatch, "tas")
    cmp = compare(files["ref"], {"a": files["a_degc"]})
    assert reads.total == 0
    with pytest.raises(InputError, match="cannot be converted"):
        compare(files["ref"], {"a": files["a_degc"]}, units="m")  # refused at once, still without reading
    assert reads.total == 0
    kelvin = compare(files["ref"], {"a": files["a"]}).scores()
    # the run written in degC (offset - 273.15) gives the run written in K: K = degC + 273.15 (SI Brochure)
    np.testing.assert_allclose(cmp.scores().value.values, kelvin.value.values, rtol=1e-9, atol=1e-9)


def test_the_read_counter_does_count_a_read(files, monkeypatch):
    cmp = compare(files["ref"], {"a": files["a"]})
    reads = _FileReads(monkeypatch, "tas")
    cmp.prepare(["MAM"])
    assert reads.total == 2


def test_variable_matched_by_standard_name_across_sources(files, tmp_path):
    run = write_cf(tmp_path / "t2m.nc", variable="t2m", field=noisy(1.0), offset=0.8, dlat=6.0, start_year=1995, years=8, dtype="float64")
    table = compare(files["ref"], {"a": run}, variable="air_temperature").scores()
    base = compare(files["ref"], {"a": files["a"]}).scores()
    np.testing.assert_allclose(table.value.values, base.value.values, rtol=1e-12)


def test_absent_variable_and_no_time_are_input_errors(files, tmp_path):
    pr = write_cf(tmp_path / "pr.nc", variable="pr", units="kg m-2 s-1", standard_name="precipitation_flux", dlat=6.0, start_year=1995, years=8)
    with pytest.raises(InputError, match="no variable 'tas'") as err:
        compare(files["ref"], {"wet": pr})
    assert err.value.file == str(pr)
    fixed = write_cf(tmp_path / "fixed.nc", with_time=False, dlat=6.0)
    with pytest.raises(InputError, match="no time") as err:
        compare(files["ref"], {"fixed": fixed})
    assert err.value.file == str(fixed)


def test_unknown_season_region_and_regrid(files, three_runs):
    cmp, _ = three_runs
    with pytest.raises(InputError, match="unknown season"):
        cmp.scores(seasons=["WINTER"])
    with pytest.raises(InputError, match="unknown region"):
        cmp.scores(regions=["atlantis"])
    with pytest.raises(InputError, match="unknown regrid"):
        compare(files["ref"], {"a": files["a"]}, regrid="cubic")
    with pytest.raises(InputError, match="unique"):
        compare(files["ref"], {"ref": files["a"]})


def test_a_season_that_cannot_be_completed_is_an_omission_not_an_abort(tmp_path):
    # one year of data: DJF lacks December of the year before (WMO practice: DJF labelled by its January)
    common = dict(dlat=10.0, dtype="float64", field=noisy(0.0))
    ref = write_cf(tmp_path / "ref.nc", start_year=1995, years=1, **common)
    run = write_cf(tmp_path / "run.nc", start_year=1995, years=1, offset=1.0, **common)
    cmp = compare(ref, {"run": run})
    table = cmp.scores(seasons=["ANN", "DJF", "JJA"])
    assert set(table["season"]) == {"ANN", "JJA"}
    assert value(table, "bias", season="JJA") == pytest.approx(1.0, rel=1e-10)
    reasons = {(o["source"], o["season"]): o["reason"] for o in cmp.omissions}
    assert "no complete DJF season" in reasons[("ref", "DJF")]
    assert cmp.provenance(seasons=["ANN", "DJF", "JJA"])["omitted"] == cmp.omissions
