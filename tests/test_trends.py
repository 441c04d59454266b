"""Behaviour of evaluation.trends on missing and degenerate input."""

from __future__ import annotations

import numpy as np
import pytest
import xarray as xr
from scipy import stats

from evaluation.trends import Trend, detrend, mann_kendall, ols_trend, sens_slope, trend_field


def test_nans_in_y_are_dropped():
    # Source: scipy.stats.linregress on the series without the NaN points.
    x = np.arange(10.0)
    y = np.array([1.0, 2.1, np.nan, 3.9, 5.2, 5.8, np.nan, 8.1, 9.0, 9.7])
    ok = np.isfinite(y)
    ours = ols_trend(y, x, adjust=False)
    ref = stats.linregress(x[ok], y[ok])
    assert ours.n == 8
    np.testing.assert_allclose([ours.slope, ours.stderr], [ref.slope, ref.stderr], rtol=1e-10)


@pytest.mark.parametrize("values", [[], [1.0], [1.0, 2.0], [np.nan, 1.0, np.nan, 2.0]])
def test_fewer_than_three_points_give_nan(values):
    # Common practice: no trend (and no error) from fewer than three values.
    t = ols_trend(np.array(values, dtype=float))
    assert isinstance(t, Trend)
    assert all(np.isnan(v) for v in (t.slope, t.intercept, t.stderr, t.pvalue, t.r1, t.n_eff))
    assert np.isnan(sens_slope(np.array(values, dtype=float)))
    assert np.isnan(mann_kendall(np.array(values, dtype=float)).z)


def test_dataarray_uses_its_year_coordinate():
    # Source: scipy.stats.linregress with the (gapped) years as x.
    years = np.array([2000, 2001, 2002, 2005, 2006, 2010])
    y = xr.DataArray([0.1, 0.3, 0.2, 0.6, 0.7, 1.1], dims="year", coords={"year": years})
    np.testing.assert_allclose(ols_trend(y).slope, stats.linregress(years, y.values).slope, rtol=1e-12)


def test_detrend_returns_residuals_with_nans_in_place():
    # Source: numpy.polyfit (degree 1) on the valid points gives the same line.
    x = np.arange(12.0)
    y = 0.5 * x + np.cos(x)
    y[5] = np.nan
    ok = np.isfinite(y)
    b, a = np.polyfit(x[ok], y[ok], 1)
    r = detrend(y)
    assert np.isnan(r[5])
    np.testing.assert_allclose(r[ok], y[ok] - (a + b * x[ok]), rtol=1e-10, atol=1e-12)
    # OLS residuals sum to zero and are orthogonal to x (normal equations).
    assert abs(np.nansum(r)) < 1e-10 and abs(np.nansum(r * x)) < 1e-9


def test_detrend_keeps_dataarray_coordinates():
    y = xr.DataArray(
        np.arange(5.0) ** 2, dims="year", coords={"year": np.arange(1990, 1995)}, attrs={"units": "K"}
    )
    r = detrend(y)
    assert isinstance(r, xr.DataArray)
    assert list(r["year"].values) == list(range(1990, 1995)) and r.attrs["units"] == "K"


def test_perfect_fit_has_zero_stderr():
    # A straight line: the residuals vanish, so the slope is exact (common practice).
    t = ols_trend(2.0 * np.arange(6.0) + 1.0)
    assert t.slope == pytest.approx(2.0) and t.stderr == pytest.approx(0.0, abs=1e-12)


def test_trend_field_rejects_non_numeric_coordinate():
    da = xr.DataArray(np.zeros((3, 2)), dims=("year", "lat"), coords={"year": ["a", "b", "c"]})
    with pytest.raises(TypeError, match="numeric"):
        trend_field(da)


def test_trend_field_without_coordinate_uses_positions():
    # Source: scipy.stats.linregress on positions 0..n-1.
    data = np.array([[1.0, 4.0], [2.0, 3.5], [2.5, 3.7], [4.0, 2.0]])
    da = xr.DataArray(data, dims=("step", "cell"))
    slope = trend_field(da, dim="step")
    expected = [stats.linregress(np.arange(4.0), data[:, k]).slope for k in range(2)]
    np.testing.assert_allclose(slope.values, expected, rtol=1e-12)
