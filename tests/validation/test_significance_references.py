"""Cell-by-cell significance of a difference of climatologies, checked against outside sources:
scipy.stats.ttest_ind, statsmodels (acf, multipletests with fdr_bh), the worked example of
Benjamini and Hochberg (1995), the AR(1) effective-size formula, and simulation."""

from __future__ import annotations

import numpy as np
import pytest
import xarray as xr
from cfdata import ar1
from scipy import stats
from statsmodels.stats.multitest import multipletests
from statsmodels.tsa.stattools import acf

from evaluation.significance import (
    FDR_LEVEL,
    bh_adjusted,
    difference_test,
    effective_sizes,
    fdr_significant,
    significant_area_fraction,
)


def samples(seed: int, *, phi: float = 0.3, n_a: int = 30, n_b: int = 25, cells: int = 60, shift: float = 0.0):
    rng = np.random.default_rng(seed)
    a = xr.DataArray(ar1(rng, phi, n_a, cells) + shift, dims=("year", "cell"), coords={"year": np.arange(1991, 1991 + n_a)})
    b = xr.DataArray(ar1(rng, phi, n_b, cells), dims=("year", "cell"), coords={"year": np.arange(1991, 1991 + n_b)})
    return a, b


def test_unadjusted_test_is_scipys_pooled_t_test() -> None:
    # scipy.stats.ttest_ind(equal_var=True): Student's pooled two-sample test, unequal sample sizes
    a, b = samples(1, shift=0.4)
    got = difference_test(a, b, adjust=False)
    ref = stats.ttest_ind(a.values, b.values, axis=0, equal_var=True)
    np.testing.assert_allclose(got["t"].values, ref.statistic, rtol=1e-10)
    np.testing.assert_allclose(got["pvalue"].values, ref.pvalue, rtol=1e-9, atol=1e-15)
    np.testing.assert_allclose(got["difference"].values, a.values.mean(0) - b.values.mean(0), rtol=1e-12)
    assert (got["dof"].values == 30 + 25 - 2).all()


def test_adjusted_test_follows_santer_with_statsmodels_autocorrelation() -> None:
    # Santer et al. (2000), eq. (6): n_e = n (1 - r1) / (1 + r1) with r1 the lag-1 autocorrelation
    # (statsmodels.tsa.stattools.acf), n when r1 <= 0; t with n_e,a + n_e,b - 2 degrees of freedom
    a, b = samples(2, phi=0.5, shift=0.5)
    got = difference_test(a, b, adjust=True)
    for cell in range(a.sizes["cell"]):
        x, y = a.values[:, cell], b.values[:, cell]
        sizes = []
        for s in (x, y):
            r1 = acf(s, nlags=1, fft=False)[1]
            sizes.append(len(s) * (1 - r1) / (1 + r1) if r1 > 0 else len(s))
        pooled = ((len(x) - 1) * x.var(ddof=1) + (len(y) - 1) * y.var(ddof=1)) / (len(x) + len(y) - 2)
        t = (x.mean() - y.mean()) / np.sqrt(pooled * (1 / sizes[0] + 1 / sizes[1]))
        dof = sizes[0] + sizes[1] - 2
        assert got["n_eff_a"].values[cell] == pytest.approx(sizes[0], rel=1e-10)
        assert got["t"].values[cell] == pytest.approx(t, rel=1e-10)
        assert got["pvalue"].values[cell] == pytest.approx(2 * stats.t.sf(abs(t), dof), rel=1e-9)


def test_effective_size_of_a_long_ar1_series() -> None:
    # for AR(1), r1 -> phi, so n_e / n -> (1 - phi) / (1 + phi) (Santer et al. 2000; common practice)
    rng = np.random.default_rng(3)
    x = ar1(rng, 0.6, 20000, 3)
    np.testing.assert_allclose(effective_sizes(x) / 20000, 0.25, atol=0.02)


def test_false_positive_rate_by_simulation() -> None:
    # 4000 cells, 30 years, no true difference (seed fixed).  White noise: the plain test rejects
    # about 5 % at p < 0.05 (binomial SE 0.35 %); the adjusted one a little less (a sampled r1 > 0
    # shrinks n_e even without autocorrelation; measured 3.4 %).  AR(1) with phi = 0.5: the plain test rejects
    # far too often; the adjusted one comes close to 5 % (measured 8 %; with 30 years the lag-1
    # estimate is biased low, so Santer's adjustment stays somewhat liberal: Zwiers and
    # von Storch 1995, J. Climate 8, 336-351).
    white_a, white_b = samples(4, phi=0.0, n_a=30, n_b=30, cells=4000)
    rate = float((difference_test(white_a, white_b, adjust=False).pvalue.values < 0.05).mean())
    assert 0.035 <= rate <= 0.065
    assert 0.02 <= float((difference_test(white_a, white_b).pvalue.values < 0.05).mean()) <= rate
    red_a, red_b = samples(5, phi=0.5, n_a=30, n_b=30, cells=4000)
    plain = float((difference_test(red_a, red_b, adjust=False).pvalue.values < 0.05).mean())
    adjusted = float((difference_test(red_a, red_b, adjust=True).pvalue.values < 0.05).mean())
    assert plain > 0.2 and adjusted < 0.10 and adjusted < plain / 2


def test_nan_and_constant_cells_are_not_tested() -> None:
    a, b = samples(6, cells=3)
    a = a.copy()
    a.values[4, 0] = np.nan  # a missing year
    a.values[:, 1] = 1.0
    b = b.copy()
    b.values[:, 1] = 1.0  # no variance in either sample
    got = difference_test(a, b)
    assert np.isnan(got["pvalue"].values[:2]).all() and np.isfinite(got["pvalue"].values[2])


# Benjamini and Hochberg (1995), section 4: fifteen p-values; at q = 0.05 the procedure rejects
# the four smallest (value from memory)
BH_EXAMPLE = [0.0001, 0.0004, 0.0019, 0.0095, 0.0201, 0.0278, 0.0298, 0.0344, 0.0459, 0.3240, 0.4262, 0.5719, 0.6528, 0.7590, 1.0000]


def test_benjamini_hochberg_worked_example() -> None:
    mask, threshold = fdr_significant(np.array(BH_EXAMPLE), level=0.05)
    assert mask.tolist() == [True] * 4 + [False] * 11
    assert threshold == 0.0095
    # and statsmodels' implementation agrees
    assert multipletests(BH_EXAMPLE, alpha=0.05, method="fdr_bh")[0].tolist() == mask.tolist()


@pytest.mark.parametrize("level", [0.05, FDR_LEVEL, 0.2])
def test_fdr_mask_and_adjusted_pvalues_match_statsmodels(level: float) -> None:
    # a field of p-values: 80 % null (uniform), 20 % signals (small p), with NaN cells
    rng = np.random.default_rng(8)
    p = np.where(rng.random(500) < 0.2, rng.random(500) * 0.01, rng.random(500))
    p[::37] = np.nan
    field = xr.DataArray(p.reshape(20, 25), dims=("lat", "lon"))
    mask, _ = fdr_significant(field, level=level)
    finite = np.isfinite(p)
    reject, adjusted, _, _ = multipletests(p[finite], alpha=level, method="fdr_bh")
    assert mask.values.ravel()[finite].tolist() == reject.tolist()
    assert not mask.values.ravel()[~finite].any()
    got = bh_adjusted(field).values.ravel()
    np.testing.assert_allclose(got[finite], adjusted, rtol=1e-12)
    assert np.isnan(got[~finite]).all()
    # scipy's false_discovery_control gives the same adjusted values
    np.testing.assert_allclose(got[finite], stats.false_discovery_control(p[finite], method="bh"), rtol=1e-12)


def test_significant_area_fraction_of_one_hemisphere() -> None:
    # on a sphere the two hemispheres have equal area: cell areas R² Δ(sin φ) Δλ (common practice)
    lat_edges = np.linspace(-90, 90, 19)
    lat = 0.5 * (lat_edges[1:] + lat_edges[:-1])
    lon = np.arange(0, 360, 10.0)
    band = np.diff(np.sin(np.deg2rad(lat_edges)))
    area = xr.DataArray(np.outer(band, np.full(lon.size, np.deg2rad(10.0))), dims=("lat", "lon"), coords={"lat": lat, "lon": lon})
    north = (area["lat"] > 0).broadcast_like(area)
    assert significant_area_fraction(north, area) == pytest.approx(0.5, abs=1e-12)
    # cells not tested (the southern polar cap) leave the denominator
    tested = (area["lat"] > -60).broadcast_like(area)
    cap = 1 - np.sin(np.deg2rad(60))  # area fraction ×2 of a cap poleward of 60°: (1 - sin 60°) / 2 of the sphere
    assert significant_area_fraction(north, area, tested=tested) == pytest.approx(0.5 / (1 - cap / 2), rel=1e-12)


def test_the_difference_test_matches_cells_by_dimension_name_not_by_position() -> None:
    # the reference stored (year, lon, lat), the run (year, lat, lon): at every cell the t of the
    # unadjusted test is scipy.stats.ttest_ind (pooled variance) of that cell's two samples
    rng = np.random.default_rng(32)
    coords = {"year": np.arange(2001, 2021), "lat": [-30.0, 0.0, 30.0], "lon": [0.0, 120.0, 240.0]}
    run = xr.DataArray(rng.standard_normal((20, 3, 3)), dims=("year", "lat", "lon"), coords=coords)
    ref = xr.DataArray(rng.standard_normal((20, 3, 3)) + np.arange(9.0).reshape(3, 3), dims=("year", "lat", "lon"),
                       coords=coords).transpose("year", "lon", "lat")
    got = difference_test(run, ref, adjust=False)
    for la in coords["lat"]:
        for lo in coords["lon"]:
            expected = stats.ttest_ind(run.sel(lat=la, lon=lo).values, ref.sel(lat=la, lon=lo).values)
            assert float(got["t"].sel(lat=la, lon=lo)) == pytest.approx(expected.statistic, rel=1e-9)
