"""Trend statistics checked against outside references (scipy, statsmodels, pymannkendall,
published formulas and a worked example)."""

from __future__ import annotations

import dask
import dask.array as dsa
import numpy as np
import pymannkendall
import pytest
import statsmodels.api as sm
import xarray as xr
from scipy import stats
from statsmodels.tsa.stattools import acf

from evaluation.trends import mann_kendall, ols_trend, sens_slope, trend_field


def _ar1_series(n: int, phi: float, seed: int, slope: float = 0.02) -> tuple[np.ndarray, np.ndarray]:
    """A linear trend plus AR(1) noise: serially correlated residuals as in Santer et al."""
    rng = np.random.default_rng(seed)
    noise = np.empty(n)
    noise[0] = rng.normal()
    for k in range(1, n):
        noise[k] = phi * noise[k - 1] + rng.normal()
    x = np.arange(1979, 1979 + n, dtype=float)
    return x, 0.3 + slope * (x - x[0]) + 0.2 * noise


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_unadjusted_trend_matches_scipy_linregress(seed):
    # Source: scipy.stats.linregress (classical OLS slope, intercept, stderr, p-value).
    x, y = _ar1_series(40, 0.5, seed)
    ours = ols_trend(y, x, adjust=False)
    ref = stats.linregress(x, y)
    np.testing.assert_allclose(ours.slope, ref.slope, rtol=1e-10)
    np.testing.assert_allclose(ours.intercept, ref.intercept, rtol=1e-10)
    np.testing.assert_allclose(ours.stderr, ref.stderr, rtol=1e-10)
    np.testing.assert_allclose(ours.pvalue, ref.pvalue, rtol=1e-10)
    assert ours.n == 40 and ours.n_eff == 40


@pytest.mark.parametrize("seed", [3, 4])
def test_unadjusted_trend_matches_statsmodels_ols(seed):
    # Source: statsmodels OLS (params, bse, pvalues) on the design [1, x].
    x, y = _ar1_series(30, 0.3, seed)
    res = sm.OLS(y, sm.add_constant(x)).fit()
    ours = ols_trend(y, x, adjust=False)
    np.testing.assert_allclose(ours.slope, res.params[1], rtol=1e-10)
    np.testing.assert_allclose(ours.intercept, res.params[0], rtol=1e-10)
    np.testing.assert_allclose(ours.stderr, res.bse[1], rtol=1e-10)
    np.testing.assert_allclose(ours.pvalue, res.pvalues[1], rtol=1e-10)


@pytest.mark.parametrize(("seed", "phi"), [(5, 0.6), (6, 0.8), (7, 0.4)])
def test_santer_adjustment_matches_direct_computation(seed, phi):
    # Source: Santer et al. (2000, JGR 105(D6) 7337-7356), eqs. for r1, n_eff, s_e and the
    # t-test with n_eff - 2 degrees of freedom, evaluated here with statsmodels residuals,
    # a numpy lag-1 autocorrelation (also checked against statsmodels' acf) and scipy.stats.t.
    x, y = _ar1_series(50, phi, seed)
    res = sm.OLS(y, sm.add_constant(x)).fit()
    e = res.resid
    d = e - e.mean()
    r1 = np.dot(d[:-1], d[1:]) / np.dot(d, d)
    np.testing.assert_allclose(r1, acf(e, nlags=1, fft=False)[1], rtol=1e-12)
    assert r1 > 0  # the AR(1) noise makes this case exercise the adjustment
    n = len(y)
    n_eff = n * (1 - r1) / (1 + r1)
    s_e = np.sqrt(np.sum(e**2) / (n_eff - 2))
    stderr = s_e / np.sqrt(np.sum((x - x.mean()) ** 2))
    pvalue = 2 * stats.t.sf(abs(res.params[1] / stderr), n_eff - 2)

    ours = ols_trend(y, x)
    np.testing.assert_allclose(ours.r1, r1, rtol=1e-10)
    np.testing.assert_allclose(ours.n_eff, n_eff, rtol=1e-10)
    np.testing.assert_allclose(ours.stderr, stderr, rtol=1e-10)
    np.testing.assert_allclose(ours.pvalue, pvalue, rtol=1e-10)
    # The adjustment can only widen the interval when r1 > 0 (Santer et al. 2000).
    assert ours.stderr > ols_trend(y, x, adjust=False).stderr


def test_negative_r1_leaves_sample_size_unchanged():
    # Source: common practice with Santer et al. (2000): r1 <= 0 is not used to inflate n.
    # Alternating residuals have a negative lag-1 autocorrelation.
    x = np.arange(20.0)
    y = 0.1 * x + np.where(np.arange(20) % 2 == 0, 0.5, -0.5)
    ours = ols_trend(y, x)
    ref = stats.linregress(x, y)  # scipy.stats.linregress: the unadjusted reference
    assert ours.r1 < 0
    assert ours.n_eff == 20
    np.testing.assert_allclose(ours.stderr, ref.stderr, rtol=1e-10)
    np.testing.assert_allclose(ours.pvalue, ref.pvalue, rtol=1e-10)


def test_strong_autocorrelation_gives_nan_pvalue():
    # Source: Santer et al. (2000): the t-test needs n_eff - 2 > 0 degrees of freedom.
    # One slow cosine period on a trend has r1 close to 1, hence n_eff <= 2 for 20 points.
    x = np.arange(20.0)
    y = 0.01 * x + np.cos(2 * np.pi * x / 20)
    ours = ols_trend(y, x)
    e = sm.OLS(y, sm.add_constant(x)).fit().resid
    r1 = acf(e, nlags=1, fft=False)[1]  # statsmodels acf
    assert 20 * (1 - r1) / (1 + r1) <= 2
    assert np.isnan(ours.pvalue) and np.isnan(ours.stderr)
    np.testing.assert_allclose(ours.slope, stats.linregress(x, y).slope, rtol=1e-10)


@pytest.mark.parametrize("seed", [8, 9])
def test_sens_slope_matches_scipy_theilslopes(seed):
    # Source: scipy.stats.theilslopes (Theil 1950; Sen 1968), and pymannkendall.sens_slope.
    x, y = _ar1_series(35, 0.3, seed)
    y[[4, 17]] = y[3]  # ties in y must not matter for the median of pairwise slopes
    np.testing.assert_allclose(sens_slope(y, x), stats.theilslopes(y, x).slope, rtol=1e-12)
    np.testing.assert_allclose(sens_slope(y), pymannkendall.sens_slope(y).slope, rtol=1e-12)


def test_sens_slope_with_repeated_x_matches_scipy():
    # Source: scipy.stats.theilslopes, which skips pairs with equal x.
    x = np.array([0, 1, 1, 2, 3, 3, 4, 5], dtype=float)
    y = np.array([1.0, 1.4, 2.0, 2.2, 2.1, 3.5, 3.9, 4.0])
    np.testing.assert_allclose(sens_slope(y, x), stats.theilslopes(y, x).slope, rtol=1e-12)


@pytest.mark.parametrize("seed", [10, 11, 12])
def test_mann_kendall_matches_pymannkendall(seed):
    # Source: pymannkendall.original_test (Mann 1945; Kendall 1975, with tie correction).
    rng = np.random.default_rng(seed)
    y = np.round(rng.normal(size=40) + 0.02 * np.arange(40), 1)  # rounding makes ties
    assert len(np.unique(y)) < len(y)
    ours = mann_kendall(y)
    ref = pymannkendall.original_test(y)
    np.testing.assert_allclose(ours.s, ref.s, rtol=1e-12)
    np.testing.assert_allclose(ours.var_s, ref.var_s, rtol=1e-12)
    np.testing.assert_allclose(ours.z, ref.z, rtol=1e-12)
    np.testing.assert_allclose(ours.pvalue, ref.p, rtol=1e-10)
    np.testing.assert_allclose(ours.tau, ref.Tau, rtol=1e-12)


def test_mann_kendall_worked_example():
    # Source: a university handout that works the Mann-Kendall test by hand (formulas of
    # Mann 1945 and Kendall 1975).  n = 14 with one tie group of size 2 (the two 12.9s):
    # Var(S) = [14*13*33 - 2*1*9] / 18 = (6006 - 18) / 18 = 332.67; Z = (54 - 1)/sqrt(332.67).
    y = [12.9, 14.8, 13.2, 15.7, 13.8, 15.6, 12.9, 11.0, 17.3, 15.9, 19.0, 18.3, 20.1, 21.7]
    ours = mann_kendall(y)
    assert ours.s == 54
    assert ours.var_s == pytest.approx(332.67, abs=0.005)
    assert ours.z == pytest.approx(2.906, abs=0.0005)
    # Two-sided p-value for Z = 2.906 from the standard normal table: about 0.0037.
    assert ours.pvalue == pytest.approx(0.0037, abs=0.0001)


def _field(nyear: int = 25, nlat: int = 4, nlon: int = 5, seed: int = 13) -> xr.DataArray:
    rng = np.random.default_rng(seed)
    years = np.arange(1990, 1990 + nyear)
    rates = rng.normal(size=(nlat, nlon)) * 0.05
    data = rates[None] * (years - years[0])[:, None, None] + rng.normal(size=(nyear, nlat, nlon))
    data[3, 0, 0] = np.nan  # a gap in one cell
    data[:, 1, 1] = np.nan  # an all-missing cell
    data[2:, 2, 2] = np.nan  # only two valid values: below the 3-point minimum
    return xr.DataArray(
        data,
        dims=("year", "lat", "lon"),
        coords={"year": years, "lat": np.linspace(-60, 60, nlat), "lon": np.linspace(-160, 160, nlon)},
        name="tas",
        attrs={"units": "K"},
    )


def _per_cell_linregress(da: xr.DataArray) -> np.ndarray:
    """Reference: scipy.stats.linregress cell by cell on the valid years."""
    out = np.full(da.shape[1:], np.nan)
    years = da["year"].values.astype(float)
    for j in range(da.shape[1]):
        for i in range(da.shape[2]):
            y = da.values[:, j, i]
            ok = np.isfinite(y)
            if ok.sum() >= 3:
                out[j, i] = stats.linregress(years[ok], y[ok]).slope
    return out


def test_trend_field_matches_per_cell_linregress():
    # Source: scipy.stats.linregress applied to each cell separately.
    da = _field()
    slope = trend_field(da, dim="year")
    assert slope.dims == ("lat", "lon")
    np.testing.assert_allclose(slope.values, _per_cell_linregress(da), rtol=1e-10, atol=1e-14)
    assert np.isnan(slope.values[1, 1]) and np.isnan(slope.values[2, 2])


def _raise_on_compute(dsk, keys, **kwargs):
    # Same pattern as xarray's own test helper raise_if_dask_computes: a scheduler that
    # refuses to run proves that nothing was computed.
    raise RuntimeError("dask computed inside trend_field")


def test_trend_field_stays_lazy_on_dask_and_agrees():
    # Source: scipy.stats.linregress per cell for the numbers; dask's scheduler hook for laziness.
    da = _field()
    lazy = da.copy(data=dsa.from_array(da.values, chunks=(25, 2, 3)))
    with dask.config.set(scheduler=_raise_on_compute):
        slope = trend_field(lazy, dim="year")
    assert isinstance(slope.data, dsa.Array)
    np.testing.assert_allclose(slope.compute().values, _per_cell_linregress(da), rtol=1e-10, atol=1e-14)
