"""Dots on the run-trend-minus-reference-trend maps: the per-cell test of a difference of two
least-squares trends (evaluation.significance.trend_difference_test), Benjamini–Hochberg over
the map and the flag variable in the NetCDF download.

Outside references: statsmodels OLS (slopes, their standard errors, an interaction regression),
statsmodels acf (lag-1 autocorrelation of the residuals), scipy.stats.t (two-sided p-values),
statsmodels multipletests(fdr_bh), the Welch–Satterthwaite formula (Satterthwaite 1946,
Welch 1947), Santer et al. (2000) effective sample size, and an analytic field whose northern
half alone has a trend difference.
"""

from __future__ import annotations

import numpy as np
import pytest
import statsmodels.api as sm
import xarray as xr
from cfdata import ar1, write_cf
from scipy import stats
from statsmodels.stats.multitest import multipletests
from statsmodels.tsa.stattools import acf

from evaluation.errors import InputError
from evaluation.export import field_bytes
from evaluation.scoring import Comparison, Source
from evaluation.significance import trend_difference_test


def series(values: np.ndarray, years: np.ndarray) -> xr.DataArray:
    return xr.DataArray(values, dims=("year", "cell"), coords={"year": years})


def welch_satterthwaite(se_a: float, se_b: float, dof_a: float, dof_b: float) -> float:
    # Satterthwaite (1946), Welch (1947): nu = (s_a^2 + s_b^2)^2 / (s_a^4/nu_a + s_b^4/nu_b)
    return (se_a**2 + se_b**2) ** 2 / (se_a**4 / dof_a + se_b**4 / dof_b)


def test_unadjusted_test_uses_statsmodels_standard_errors() -> None:
    # statsmodels OLS: each slope and its standard error (n - 2 degrees of freedom); scipy.stats.t
    rng = np.random.default_rng(11)
    years = np.arange(1981.0, 2011.0)
    a = rng.standard_normal((30, 9)) * rng.uniform(0.3, 2.0, 9) + 0.03 * (years - 1981)[:, None]
    b = rng.standard_normal((30, 9)) * rng.uniform(0.3, 2.0, 9)
    got = trend_difference_test(series(a, years), series(b, years), adjust=False)
    X = sm.add_constant(years)
    for cell in range(9):
        fa, fb = sm.OLS(a[:, cell], X).fit(), sm.OLS(b[:, cell], X).fit()
        se_a, se_b = fa.bse[1], fb.bse[1]
        t = (fa.params[1] - fb.params[1]) / np.hypot(se_a, se_b)
        dof = welch_satterthwaite(se_a, se_b, 28.0, 28.0)
        assert got["difference"].values[cell] == pytest.approx(fa.params[1] - fb.params[1], rel=1e-10)
        assert got["t"].values[cell] == pytest.approx(t, rel=1e-9)
        assert got["dof"].values[cell] == pytest.approx(dof, rel=1e-9)
        assert got["pvalue"].values[cell] == pytest.approx(2 * stats.t.sf(abs(t), dof), rel=1e-7)


def test_equal_residual_variances_give_the_interaction_regression() -> None:
    # When both fits leave the same residual sum of squares, the test is exactly the t-test of
    # the interaction term of one pooled regression y ~ 1 + x + g + x g (statsmodels OLS),
    # with 2n - 4 degrees of freedom: b's residuals are a's with the sign changed.
    rng = np.random.default_rng(12)
    years = np.arange(2000.0, 2024.0)
    X = sm.add_constant(years)
    a = rng.standard_normal((24, 5)) + 0.05 * (years - 2000)[:, None]
    b = np.empty_like(a)
    for cell in range(5):
        fit = sm.OLS(a[:, cell], X).fit()
        b[:, cell] = 1.0 + 0.01 * (years - 2000) - fit.resid
    got = trend_difference_test(series(a, years), series(b, years), adjust=False)
    g = np.r_[np.ones(24), np.zeros(24)]
    x2 = np.r_[years, years]
    design = np.column_stack([np.ones(48), x2, g, x2 * g])
    for cell in range(5):
        pooled = sm.OLS(np.r_[a[:, cell], b[:, cell]], design).fit()
        assert got["t"].values[cell] == pytest.approx(pooled.tvalues[3], rel=1e-9)
        assert got["dof"].values[cell] == pytest.approx(pooled.df_resid, rel=1e-12)
        assert got["pvalue"].values[cell] == pytest.approx(pooled.pvalues[3], rel=1e-7)


def test_adjusted_test_reduces_each_sample_to_its_santer_size() -> None:
    # Santer et al. (2000): r1 of each fit's residuals (statsmodels acf), n_e = n (1 - r1)/(1 + r1)
    # when r1 > 0, the slope's standard error sqrt(SSE / (n_e - 2) / Sxx) (statsmodels bse
    # rescaled by sqrt((n - 2)/(n_e - 2))); t-distribution from scipy.stats
    rng = np.random.default_rng(13)
    years = np.arange(1990.0, 2030.0)
    n = years.size
    noise = np.zeros((n, 12))
    for i in range(1, n):  # AR(1) noise, lag-1 autocorrelation 0.6
        noise[i] = 0.6 * noise[i - 1] + rng.standard_normal(12)
    a = noise + 0.04 * (years - 1990)[:, None]
    b = rng.standard_normal((n, 12)) * 0.8
    got = trend_difference_test(series(a, years), series(b, years))
    X = sm.add_constant(years)
    for cell in range(12):
        ses, sizes = [], []
        for y in (a[:, cell], b[:, cell]):
            fit = sm.OLS(y, X).fit()
            r1 = acf(fit.resid, nlags=1, fft=False)[1]
            n_e = n * (1 - r1) / (1 + r1) if r1 > 0 else float(n)
            ses.append(fit.bse[1] * np.sqrt((n - 2) / (n_e - 2)))
            sizes.append(n_e)
        t = (sm.OLS(a[:, cell], X).fit().params[1] - sm.OLS(b[:, cell], X).fit().params[1]) / np.hypot(*ses)
        dof = welch_satterthwaite(ses[0], ses[1], sizes[0] - 2, sizes[1] - 2)
        assert got["n_eff_a"].values[cell] == pytest.approx(sizes[0], rel=1e-9)
        assert got["n_eff_b"].values[cell] == pytest.approx(sizes[1], rel=1e-9)
        assert got["t"].values[cell] == pytest.approx(t, rel=1e-8)
        assert got["dof"].values[cell] == pytest.approx(dof, rel=1e-8)
        assert got["pvalue"].values[cell] == pytest.approx(2 * stats.t.sf(abs(t), dof), rel=1e-7)
    # persistence lowers the effective size of the run's series well below its 40 years
    assert np.nanmedian(got["n_eff_a"].values) < 0.6 * n



def test_false_positive_rate_by_simulation() -> None:
    # 4000 cells, 30 years, equal true trends (seed fixed); one series three times as noisy as the
    # other (Welch-Satterthwaite must cope).  White noise: the unadjusted test rejects about 5 % at
    # p < 0.05 (binomial SE 0.35 %), the adjusted one a little less (a sampled r1 > 0 shrinks n_e
    # even without persistence).  AR(1) with phi = 0.5: the unadjusted test rejects far too often
    # (measured 25 %), the adjusted one comes close to 5 % (measured 8-9 %: with 30 years the
    # lag-1 estimate is biased low; Zwiers and von Storch 1995, J. Climate 8, 336-351).
    rng = np.random.default_rng(21)
    years = np.arange(1991.0, 2021.0)
    for phi, plain_range, adjusted_range in ((0.0, (0.035, 0.065), (0.025, 0.06)), (0.5, (0.18, 0.35), (0.055, 0.11))):
        a, b = series(3.0 * ar1(rng, phi, 30, 4000), years), series(ar1(rng, phi, 30, 4000), years)
        plain = float((trend_difference_test(a, b, adjust=False)["pvalue"].values < 0.05).mean())
        adjusted = float((trend_difference_test(a, b)["pvalue"].values < 0.05).mean())
        assert plain_range[0] <= plain <= plain_range[1], (phi, plain)
        assert adjusted_range[0] <= adjusted <= adjusted_range[1], (phi, adjusted)


def test_untestable_cells_are_nan() -> None:
    years = np.arange(2001.0, 2011.0)
    a = np.tile(np.linspace(0, 1, 10)[:, None], (1, 4))
    b = a.copy()
    a[3, 0] = np.nan  # a missing year
    b[:, 2] = 5.0  # a constant reference against a perfect ramp: different slopes, no noise at all
    got = trend_difference_test(series(a, years), series(b, years))
    assert np.isnan(got["pvalue"].values[0]) and np.isnan(got["difference"].values[0])
    # two identical series: no difference (p-value 1, or NaN where rounding leaves no residual at all)
    assert not got["pvalue"].values[1] < 0.99
    assert got["pvalue"].values[2] < 1e-12  # (near-)perfect fits of different slopes
    short = trend_difference_test(series(a[:2], years[:2]), series(b[:2], years[:2]))
    assert np.isnan(short["pvalue"].values).all()  # two years give no residual


# ---------------------------------------------------------------- the maps of a comparison
TREND = 0.2  # K per year, in the run's northern half only


def yearly_noise(lat, lon, year, seed: float):
    """Uniform noise in [-1, 1), one value per cell and year, with no persistence: the usual
    sine hash (fractional part of a large multiple of a sine; common practice in graphics)."""
    h = np.sin(12.9898 * year + 78.233 * lat + 37.719 * lon + 11.135 * seed) * 43758.5453
    return 2.0 * (h - np.floor(h)) - 1.0


def field(seed: float, *, trend: float = 0.0):
    def f(lat, lon, year, month):
        phi = np.deg2rad(lat)
        return (
            270.0 + 20.0 * np.cos(phi) ** 2 + 6.0 * np.sin(phi) * np.cos(2 * np.pi * (month - 1) / 12.0)
            + 0.5 * yearly_noise(lat, lon, year, seed)
            + trend * (year - 1991) * (lat > 0)
        )

    return f


@pytest.fixture(scope="module")
def comparison(tmp_path_factory) -> Comparison:
    tmp = tmp_path_factory.mktemp("trend-difference")
    common = dict(dlat=10.0, start_year=1991, years=22, dtype="float64")
    ref = write_cf(tmp / "ref.nc", field=field(0.0), **common)
    run = write_cf(tmp / "run.nc", field=field(1.3, trend=TREND), **common)
    return Comparison(reference=Source("ref", "reference", [str(ref)]), models=[Source("run", "model", [str(run)])],
                      variable="tas", period="1992-2011", cache=False)


def test_only_the_half_with_a_trend_difference_is_dotted(comparison) -> None:
    got = comparison.trend_difference_significance("run", "ANN")
    lat = got["lat"].broadcast_like(got["pvalue"]).values
    north, south = lat > 0, lat < 0
    # analytic: the run's trend exceeds the reference's by 0.2 K/year in the north, not at all in the south
    diff = got["difference"].values
    assert np.nanmean(diff[north]) == pytest.approx(TREND, abs=0.02)
    assert abs(np.nanmean(diff[south])) < 0.02
    sig = got["significant"].values
    assert sig[north].all()
    # Benjamini-Hochberg at 10 %: about one dot in ten may be false; all northern cells are true
    # discoveries, so at most a few southern cells may carry a dot
    assert sig[south].sum() <= 0.1 * sig.sum() + 1
    # the dots are statsmodels' Benjamini-Hochberg rejections at the project's FDR level
    p = got["pvalue"].values.ravel()
    finite = np.isfinite(p)
    assert finite.all()
    reject = multipletests(p[finite], alpha=got.attrs["fdr_level"], method="fdr_bh")[0]
    assert got.attrs["fdr_level"] == 0.10  # Wilks (2016): alpha_FDR = 2 x the global 5 %
    assert sig.ravel()[finite].tolist() == reject.tolist()
    # and the per-cell p-values follow the function checked above on the yearly season means
    run, ref = comparison._aligned("run", "ANN")
    direct = trend_difference_test(run, ref)
    np.testing.assert_allclose(got["pvalue"].values, direct["pvalue"].transpose(*got["pvalue"].dims).values, rtol=1e-12)


def test_the_map_and_its_dots_agree_and_reach_the_download(comparison, tmp_path) -> None:
    from app.views.maps import with_mask

    field_ = comparison.trend_difference("run", "ANN")  # per decade
    test = comparison.trend_difference_significance("run", "ANN")  # per year
    np.testing.assert_allclose(field_.values, 10.0 * test["difference"].transpose(*field_.dims).values, rtol=1e-10)
    flags = comparison.significance_mask("run", "ANN", of="trend_difference")
    assert ((flags.values == 2) == test["significant"].values).all()
    assert ((flags.values == 0) == np.isnan(test["pvalue"].values)).all()
    # CF 1.10 section 3.5 flag variable beside the field, named by ancillary_variables
    (tmp_path / "field.nc").write_bytes(field_bytes(with_mask(field_, flags, "tas"), provenance=None))
    back = xr.open_dataset(tmp_path / "field.nc", decode_cf=False)
    assert str(flags.name) == "tas_trend_difference_significance"
    assert back[str(field_.name)].attrs["ancillary_variables"] == str(flags.name)
    assert back[str(flags.name)].dtype == np.int8
    assert back[str(flags.name)].attrs["flag_meanings"] == "not_tested not_significant significant"
    assert "Welch-Satterthwaite" in back[str(flags.name)].attrs["comment"]
    np.testing.assert_array_equal(np.asarray(back[str(flags.name)].values).squeeze(), flags.values)
    back.close()
    # gridscore check reads the download: the field can be scored, the flags named as a mask
    from evaluation.checking import check_file

    report = check_file(str(tmp_path / "field.nc"))
    assert report.can_score, report.problems
    assert any(str(flags.name) in note for note in report.notes)


def test_a_reference_without_years_is_refused(tmp_path) -> None:
    # a month dimension (1..12) is a climatology: no years, so no trend to compare with
    lat, lon = np.arange(-75.0, 90.0, 30.0), np.arange(15.0, 360.0, 30.0)
    clim = xr.Dataset(
        {"tas": (("month", "lat", "lon"), np.full((12, lat.size, lon.size), 280.0), {"units": "K", "standard_name": "air_temperature"})},
        coords={"month": ("month", np.arange(1, 13, dtype="int32")), "lat": ("lat", lat, {"units": "degrees_north"}),
                "lon": ("lon", lon, {"units": "degrees_east"})},
    )
    clim.to_netcdf(tmp_path / "clim.nc")
    run = write_cf(tmp_path / "run.nc", dlat=30.0, start_year=2001, years=5, dtype="float64")
    comparison = Comparison(reference=Source("clim", "reference", [str(tmp_path / "clim.nc")]),
                            models=[Source("run", "model", [str(run)])], variable="tas", cache=False)
    with pytest.raises(InputError, match="climatology"):
        comparison.trend_difference_significance("run", "ANN")


def test_cells_are_matched_by_dimension_name_not_by_position() -> None:
    # the reference's cells stored (year, lon, lat), the run's (year, lat, lon): each cell's
    # difference is statsmodels OLS slope of the run minus that of the reference at that cell
    rng = np.random.default_rng(31)
    years = np.arange(2001.0, 2021.0)
    coords = {"year": years, "lat": [-30.0, 0.0, 30.0], "lon": [0.0, 120.0, 240.0]}
    run = xr.DataArray(rng.standard_normal((20, 3, 3)) + 0.2 * (years - 2001)[:, None, None], dims=("year", "lat", "lon"), coords=coords)
    pattern = np.arange(9.0).reshape(3, 3)  # a different trend in every cell
    ref = xr.DataArray(rng.standard_normal((20, 3, 3)) + 0.05 * pattern * (years - 2001)[:, None, None], dims=("year", "lat", "lon"),
                       coords=coords).transpose("year", "lon", "lat")
    got = trend_difference_test(run, ref)
    X = sm.add_constant(years)
    for la in coords["lat"]:
        for lo in coords["lon"]:
            expected = (sm.OLS(run.sel(lat=la, lon=lo).values, X).fit().params[1]
                        - sm.OLS(ref.sel(lat=la, lon=lo).values, X).fit().params[1])
            assert float(got["difference"].sel(lat=la, lon=lo)) == pytest.approx(expected, rel=1e-9)
