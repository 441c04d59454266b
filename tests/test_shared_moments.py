"""The score loop's shortcuts give the direct formulas' numbers.

A reference's per-cell moments are made once and serve every run tested against it
(evaluation.significance.sample_moments / difference_statistics); the bootstrap's Gram
matrices of a band of latitudes are built on a view of the cells (evaluation.bootstrap.
error_moments).  Each is checked here against an outside computation: numpy's mean and
var, statsmodels' acf, scipy's ttest_ind cell by cell, and the Gram matrix written out
with numpy.einsum.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats
from statsmodels.tsa.stattools import acf

from evaluation.bootstrap import error_moments
from evaluation.significance import difference_statistics, sample_moments


def _ar1(rng, years: int, cells: int, phi: float) -> np.ndarray:
    x = np.empty((years, cells))
    x[0] = rng.standard_normal(cells)
    for t in range(1, years):
        x[t] = phi * x[t - 1] + rng.standard_normal(cells)
    return x


def test_sample_moments_equal_numpy_and_statsmodels_acf() -> None:
    rng = np.random.default_rng(5)
    x = 280.0 + _ar1(rng, 25, 40, 0.6)
    x[3, 7] = np.nan  # a cell with a missing year: no effective size
    m = sample_moments(x)
    # numpy.mean / numpy.var(ddof=1): the same operations, so exactly equal
    np.testing.assert_array_equal(m.mean, x.mean(axis=0))
    np.testing.assert_array_equal(m.var, x.var(axis=0, ddof=1))
    for cell in range(x.shape[1]):
        if cell == 7:
            assert np.isnan(m.size[cell])
            continue
        # Santer et al. (2000) eq. 6 with r1 from statsmodels' acf (lag 1, not adjusted)
        r1 = acf(x[:, cell], nlags=1, adjusted=False, fft=False)[1]
        expected = 25 * (1 - r1) / (1 + r1) if r1 > 0 else 25.0
        assert m.size[cell] == pytest.approx(expected, rel=1e-12)


def test_one_reference_moments_for_several_runs_equal_scipy_ttest_per_cell() -> None:
    rng = np.random.default_rng(11)
    years, cells = 20, 30
    ref = rng.standard_normal((years, cells))
    shared = sample_moments(ref)
    for shift in (0.0, 0.8):
        run = rng.standard_normal((years, cells)) + shift
        mask = np.ones(cells, dtype=bool)
        mask[[2, 17]] = False  # cells a run does not have: set to 0 as the score loop does, then left untested
        diff, t, dof, pvalue, _, _ = difference_statistics(sample_moments(np.where(mask, run, 0.0)), shared, adjust=False)
        pvalue = np.where(mask, pvalue, np.nan)
        assert np.isnan(pvalue[[2, 17]]).all()
        for cell in np.flatnonzero(mask):
            # scipy.stats.ttest_ind: the pooled-variance two-sample t-test
            res = stats.ttest_ind(run[:, cell], ref[:, cell])
            assert t[cell] == pytest.approx(res.statistic, rel=1e-10)
            assert pvalue[cell] == pytest.approx(res.pvalue, rel=1e-9)
            assert dof[cell] == 2 * years - 2
            assert diff[cell] == pytest.approx(run[:, cell].mean() - ref[:, cell].mean(), abs=1e-13)


@pytest.mark.parametrize("cells", ["whole map", "band", "scattered"])
def test_gram_matrix_of_a_region_equals_the_direct_formula(cells: str) -> None:
    rng = np.random.default_rng(3)
    years, n = 15, 600
    d = rng.standard_normal((years, n))
    w = rng.random(n) + 0.1
    if cells == "band":
        w[:150] = 0.0
        w[420:] = 0.0
        d[:, :100] = np.nan  # NaN in cells of zero weight is allowed
    elif cells == "scattered":
        w[rng.random(n) < 0.5] = 0.0
    got = error_moments(d, w, np.arange(years))
    keep = w > 0
    dk, wk = d[:, keep], w[keep]
    # G = D diag(w) D^T / sum(w) and the yearly weighted mean D w / sum(w), written out with einsum
    gram = np.einsum("ic,jc,c->ij", dk, dk, wk) / wk.sum()
    np.testing.assert_allclose(got.gram, gram, rtol=1e-12, atol=0)
    np.testing.assert_allclose(got.bias, np.einsum("ic,c->i", dk, wk) / wk.sum(), rtol=1e-12, atol=1e-15)


@pytest.mark.parametrize("level", [0.10, 0.05])
def test_p_values_left_out_above_the_level_give_the_benjamini_hochberg_mask_of_statsmodels(level: float) -> None:
    from statsmodels.stats.multitest import multipletests

    from evaluation.significance import fdr_significant

    rng = np.random.default_rng(21)
    years, cells = 12, 4000
    ref = rng.standard_normal((years, cells))
    run = rng.standard_normal((years, cells)) + np.where(np.arange(cells) < 600, 1.2, 0.0)  # a signal in some cells
    _, t, _, pvalue, _, _ = difference_statistics(sample_moments(run), sample_moments(ref), adjust=False, only_below=level)
    mask, _ = fdr_significant(pvalue, level=level)
    # scipy.stats.ttest_ind p-values of every cell, then statsmodels' Benjamini-Hochberg
    full = stats.ttest_ind(run, ref, axis=0).pvalue
    expected = multipletests(full, alpha=level, method="fdr_bh")[0]
    assert expected.sum() > 100  # the signal is found
    np.testing.assert_array_equal(mask, expected)
    computed = pvalue < 1.0
    np.testing.assert_allclose(pvalue[computed], full[computed], rtol=1e-10)
    assert (full[~computed] > level).all()  # only p-values above the level were left out
    assert computed.sum() < cells  # and some were


def test_gram_matrices_of_latitude_bands_from_row_sums_equal_the_direct_formula() -> None:
    from evaluation.bootstrap import banded_error_moments, row_grams

    rng = np.random.default_rng(17)
    years, nlat, nlon = 20, 12, 24
    d = rng.standard_normal((years, nlat * nlon))
    lat = np.linspace(-82.5, 82.5, nlat)
    area = np.repeat(np.cos(np.deg2rad(lat)), nlon) * (rng.random(nlat * nlon) > 0.1)  # some cells masked (weight 0)
    grams = row_grams(d, area, nlat)
    bands = {"whole map": np.ones(nlat), "tropics": (np.abs(lat) < 30).astype(float),
             "a band partly covering its edge rows": np.clip((lat + 40.0) / 15.0, 0.0, 1.0) * (lat < 50)}
    for name, f in bands.items():
        w = area * np.repeat(f, nlon)
        got = banded_error_moments(grams, f, d, w, np.arange(years))
        # G = D diag(w) D^T / sum(w) and D w / sum(w), written out with einsum
        np.testing.assert_allclose(got.gram, np.einsum("ic,jc,c->ij", d, d, w) / w.sum(), rtol=1e-12, atol=0, err_msg=name)
        np.testing.assert_allclose(got.bias, np.einsum("ic,c->i", d, w) / w.sum(), rtol=1e-12, atol=1e-15, err_msg=name)
