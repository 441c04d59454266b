"""Whether a difference of climatologies stands out from interannual variability, cell by cell.

A bias map compares two climatologies, each the mean of a few decades of yearly season
means.  :func:`difference_test` tests the difference at every cell with a two-sample
t-test whose sample sizes are reduced for lag-1 autocorrelation as Santer et al. (2000,
J. Geophys. Res. 105, 7337-7356) do for trends.  Testing thousands of cells at once finds
"significant" cells by chance; :func:`fdr_significant` controls the false discovery rate
(Benjamini and Hochberg 1995, J. R. Stat. Soc. B 57, 289-300), as Wilks (2016, Bull. Amer.
Meteor. Soc. 97, 2263-2273) recommends for fields; :func:`significant_area_fraction`
summarises the result as one number.  :func:`trend_test` gives the per-cell p-values of
trends (Santer et al. 2000), to which the same FDR control applies;
:func:`trend_difference_test` those of a run's trend minus the reference's;
:func:`significance_flags` writes a mask as a CF flag variable.
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np
import xarray as xr

# scipy.special.stdtr is what scipy.stats.t.sf calls (stdtr(df, -t)); importing scipy.stats
# costs about 1 s of every score, so it is imported only where bh_adjusted needs it
from scipy import special

__all__ = [
    "FDR_LEVEL",
    "SampleMoments",
    "bh_adjusted",
    "difference_statistics",
    "difference_test",
    "effective_sizes",
    "fdr_significant",
    "sample_moments",
    "significance_flags",
    "significant_area_fraction",
    "trend_difference_test",
    "trend_test",
]

#: The false-discovery level: Wilks (2016) shows that alpha_FDR = 2 alpha_global keeps a
#: global test level alpha_global = 0.05 for the strongly correlated fields of climate data.
FDR_LEVEL = 0.10


def effective_sizes(x: np.ndarray, *, axis: int = 0) -> np.ndarray:
    """Effective sample size ``n (1 - r1) / (1 + r1)`` along ``axis`` (Santer et al. 2000, eq. 6).

    ``r1`` is the sample lag-1 autocorrelation of the anomalies about the mean,
    ``sum(d_t d_t+1) / sum(d_t^2)`` (the estimator of :func:`evaluation.trends.ols_trend`).

    Notes
    -----
    ``n`` itself where ``r1 <= 0`` or where the series has no variance (common practice:
    negative autocorrelation is not allowed to inflate the sample).  NaN anywhere along
    ``axis`` gives NaN.
    """
    return sample_moments(np.moveaxis(np.asarray(x, dtype="float64"), axis, 0)).size


class SampleMoments(NamedTuple):
    """What the test of :func:`difference_test` needs of one sample ``(year, cell)``, per cell.

    ``n`` years, ``mean``, ``var`` (``ddof=1``) and the effective size ``size``
    (:func:`effective_sizes`); a source's moments serve every run tested against it.
    """

    n: int
    mean: np.ndarray
    var: np.ndarray
    size: np.ndarray


def sample_moments(x: np.ndarray) -> SampleMoments:
    """:class:`SampleMoments` of a float64 ``(year, cell)`` array (years along axis 0).

    Notes
    -----
    One pass of anomalies for both the variance and the lag-1 autocorrelation: the same
    operations, in the same order, as ``x.mean(axis=0)``, ``x.var(axis=0, ddof=1)`` and
    :func:`effective_sizes`, so the numbers are identical to theirs.
    """
    n = x.shape[0]
    mean = x.mean(axis=0)
    d = x - mean
    products = d * d
    denom = products.sum(axis=0)
    lagged = np.multiply(d[:-1], d[1:], out=products[:-1])  # the same products, in the buffer of the squares
    with np.errstate(invalid="ignore", divide="ignore"):
        r1 = lagged.sum(axis=0) / denom
        var = denom / max(n - 1, 0)
    size = np.where(np.isfinite(r1) & (r1 > 0), n * (1.0 - r1) / (1.0 + r1), float(n))
    return SampleMoments(n, mean, var, np.where(np.isfinite(x).all(axis=0), size, np.nan))


def difference_test(a: xr.DataArray, b: xr.DataArray, *, dim: str = "year", adjust: bool = True) -> xr.Dataset:
    """Two-sample t-test of ``mean(a) - mean(b)`` along ``dim`` at every other index (cell).

    Parameters
    ----------
    a, b
        Yearly season means ``(dim, ...)`` of a run and of a reference on one grid; the
        years need not be the same nor as many.
    dim
        The dimension of the samples.
    adjust
        Reduce each sample size to its effective size (:func:`effective_sizes`).
        ``False`` gives the ordinary pooled-variance test (``scipy.stats.ttest_ind``).

    Returns
    -------
    Dataset
        ``difference`` (mean of a minus mean of b), ``t``, ``dof``, ``pvalue``
        (two-sided), ``n_eff_a`` and ``n_eff_b``, on the other dimensions.

    Notes
    -----
    The pooled variance ``s² = ((n_a-1) s_a² + (n_b-1) s_b²) / (n_a + n_b - 2)`` uses the
    sample variances over all years; only the standard error ``s sqrt(1/n'_a + 1/n'_b)``
    and the degrees of freedom ``n'_a + n'_b - 2`` use the effective sizes ``n'``, as
    Santer et al. (2000) treat the residual variance and ``n_e`` of a trend.  scipy's
    ``ttest_ind`` has no effective sample size, so the statistic is written out here.
    A cell with NaN in any year of either sample, fewer than two years in a sample,
    non-positive degrees of freedom or zero variance in both samples gets NaN t and
    p-value (a constant difference has no interannual variability to test against).
    """
    a = a.transpose(dim, ...)
    b = b.transpose(*a.dims)  # the cells in a's order: the arrays are compared position by position
    ma = sample_moments(np.asarray(a.values, dtype="float64"))
    mb = sample_moments(np.asarray(b.values, dtype="float64"))
    diff, t, dof, pvalue, ea, eb = difference_statistics(ma, mb, adjust=adjust)
    other = [d for d in a.dims if d != dim]
    coords = {k: v for k, v in a.coords.items() if dim not in v.dims}
    out = xr.Dataset(
        {
            "difference": (other, diff),
            "t": (other, t),
            "dof": (other, dof),
            "pvalue": (other, pvalue),
            "n_eff_a": (other, ea),
            "n_eff_b": (other, eb),
        },
        coords=coords,
    )
    out.attrs = {"test": "two-sample t-test, pooled variance" + (", Santer et al. (2000) effective sample sizes" if adjust else "")}
    return out


def difference_statistics(ma: SampleMoments, mb: SampleMoments, *, adjust: bool = True, only_below: float | None = None
                          ) -> tuple[np.ndarray, ...]:
    """``difference``, ``t``, ``dof``, ``pvalue``, ``n_eff_a``, ``n_eff_b`` of :func:`difference_test`
    from the two samples' :class:`SampleMoments` (plain arrays, cells in the same order).

    ``only_below``: the p-value is computed only where it can be at most ``only_below``
    and is 1 at the other tested cells.  Student's t has heavier tails than the normal
    distribution for any degrees of freedom, so ``|t|`` below the normal quantile
    ``z(1 - only_below/2)`` gives a p-value above ``only_below``.  Benjamini–Hochberg at a
    level of at most ``only_below`` then gives the same mask and threshold
    (:func:`fdr_significant`: such p-values never pass, and the cells tested stay counted).
    """
    na, nb = ma.n, mb.n
    if adjust:
        ea, eb = ma.size, mb.size
    else:
        ea = np.where(np.isfinite(ma.size), float(na), np.nan)
        eb = np.where(np.isfinite(mb.size), float(nb), np.nan)
    with np.errstate(invalid="ignore", divide="ignore"):
        diff = ma.mean - mb.mean
        pooled = ((na - 1) * ma.var + (nb - 1) * mb.var) / (na + nb - 2) if na + nb > 2 else np.full(diff.shape, np.nan)
        dof = ea + eb - 2.0
        stderr = np.sqrt(pooled * (1.0 / ea + 1.0 / eb))
        t = np.where((dof > 0) & (stderr > 0) & (na > 1) & (nb > 1), diff / stderr, np.nan)
        if only_below is None:
            pvalue = np.where(np.isfinite(t), 2.0 * special.stdtr(np.where(dof > 0, dof, 1.0), -np.abs(t)), np.nan)
        else:
            pvalue = np.where(np.isfinite(t), 1.0, np.nan)
            near = np.isfinite(t) & (np.abs(t) >= special.ndtri(1.0 - only_below / 2.0) * (1.0 - 1e-9))
            pvalue[near] = 2.0 * special.stdtr(dof[near], -np.abs(t[near]))
    return diff, t, dof, pvalue, ea, eb


def bh_adjusted(pvalues: np.ndarray | xr.DataArray) -> np.ndarray | xr.DataArray:
    """Benjamini–Hochberg adjusted p-values (``scipy.stats.false_discovery_control``, ``bh``).

    Notes
    -----
    NaN p-values (cells not tested: missing data, no variance) are left out of the count
    of tests and stay NaN.  An input with no finite value is returned as all NaN.
    """
    from scipy import stats

    values = np.asarray(pvalues, dtype="float64")
    out = np.full(values.shape, np.nan)
    finite = np.isfinite(values)
    if finite.any():
        out[finite] = stats.false_discovery_control(values[finite], method="bh")
    if isinstance(pvalues, xr.DataArray):
        return pvalues.copy(data=out)
    return out


def fdr_significant(pvalues: np.ndarray | xr.DataArray, *, level: float = FDR_LEVEL) -> tuple[np.ndarray | xr.DataArray, float]:
    """Which tests are significant under false-discovery-rate control, and the p-value threshold.

    Parameters
    ----------
    pvalues
        One p-value per cell (any shape).
    level
        The false-discovery level ``alpha_FDR`` (default :data:`FDR_LEVEL`).

    Returns
    -------
    (mask, threshold)
        ``mask`` True where significant (same type and shape as ``pvalues``);
        ``threshold`` the largest p-value ``p_(k)`` with ``p_(k) <= (k / m) alpha_FDR``
        (Wilks 2016, eq. 3), 0 when no p-value passes.

    Notes
    -----
    ``m`` counts the finite p-values only; NaN cells are never significant.
    """
    if not 0.0 < level < 1.0:
        raise ValueError("the false-discovery level must lie between 0 and 1")
    values = np.asarray(pvalues, dtype="float64")
    finite = np.sort(values[np.isfinite(values)])
    m = finite.size
    passing = finite[finite <= level * np.arange(1, m + 1) / max(m, 1)]
    threshold = float(passing.max()) if passing.size else 0.0
    with np.errstate(invalid="ignore"):
        mask = np.isfinite(values) & (values <= threshold) if passing.size else np.zeros(values.shape, dtype=bool)
    if isinstance(pvalues, xr.DataArray):
        return pvalues.copy(data=mask), threshold
    return mask, threshold


def significant_area_fraction(significant: xr.DataArray, weights: xr.DataArray, *, tested: xr.DataArray | None = None) -> float:
    """The area-weighted fraction of the tested cells that are significant.

    Parameters
    ----------
    significant
        Boolean mask of significant cells.
    weights
        Cell areas (times a region's fraction); NaN counts as 0.
    tested
        Cells that were tested (default: every cell of non-zero weight).

    Notes
    -----
    NaN when no weight is tested.  Wilks (2016) warns that the fraction of locally
    significant area is not itself a test of the field; read it with the FDR mask.
    """
    w = weights.fillna(0.0)
    if tested is not None:
        w = w.where(tested, 0.0)
    total = float(w.sum())
    if total <= 0.0:
        return float("nan")
    return float((w * significant.astype("float64")).sum() / total)


def trend_test(da: xr.DataArray, *, dim: str = "year", adjust: bool = True) -> xr.Dataset:
    """Least-squares trend along ``dim`` and its two-sided p-value at every other index (cell).

    Parameters
    ----------
    da
        Yearly season means ``(dim, ...)``; the ``dim`` coordinate (numeric) is the abscissa.
    adjust
        Reduce the sample size for lag-1 autocorrelation of the residuals (Santer et al.
        2000); ``False`` gives the classical test of ``scipy.stats.linregress``.

    Returns
    -------
    Dataset
        ``slope`` (per unit of ``dim``), ``pvalue``, ``n_eff`` and ``stderr`` (the slope's
        standard error ``s_e / sqrt(Σ(x - x̄)²)``) on the other dimensions.

    Notes
    -----
    The cell-by-cell form of :func:`evaluation.trends.ols_trend`, vectorised: ``r1`` the
    lag-1 autocorrelation of the residuals about their mean, ``n_eff = n (1 - r1)/(1 + r1)``
    (``n`` where ``r1 <= 0``), ``s_e² = Σe² / (n_eff - 2)``, ``t = slope sqrt(Σ(x - x̄)²) / s_e``
    with ``n_eff - 2`` degrees of freedom.  A cell with NaN in any year, fewer than 3
    years or ``n_eff <= 2`` gets NaN p-value; a perfect fit gets 0 (NaN for a zero slope).
    """
    da = da.transpose(dim, ...)
    y = np.asarray(da.values, dtype="float64")
    n = y.shape[0]
    x = np.asarray(da[dim].values if dim in da.coords else np.arange(n), dtype="float64")
    shape = (n,) + (1,) * (y.ndim - 1)
    dx = (x - x.mean()).reshape(shape)
    sxx = float((dx * dx).sum())
    with np.errstate(invalid="ignore", divide="ignore"):
        slope = (dx * (y - y.mean(axis=0))).sum(axis=0) / sxx if sxx > 0 else np.full(y.shape[1:], np.nan)
        e = y - y.mean(axis=0) - slope * dx
        sse = (e * e).sum(axis=0)
        d = e - e.mean(axis=0)
        r1 = (d[:-1] * d[1:]).sum(axis=0) / (d * d).sum(axis=0)
        n_eff = np.where(adjust & np.isfinite(r1) & (r1 > 0), n * (1.0 - r1) / (1.0 + r1), float(n))
        dof = n_eff - 2.0
        stderr = np.sqrt(sse / np.where(dof > 0, dof, np.nan) / sxx)
        t = np.abs(slope) / stderr
        pvalue = np.where(stderr > 0, 2.0 * special.stdtr(np.where(dof > 0, dof, 1.0), -t), np.where(slope != 0, 0.0, np.nan))
    ok = np.isfinite(y).all(axis=0) & (n >= 3) & (sxx > 0) & (dof > 0)
    other = [k for k in da.dims if k != dim]
    coords = {k: v for k, v in da.coords.items() if dim not in v.dims}
    out = xr.Dataset(
        {
            "slope": (other, np.where(ok, slope, np.nan)),
            "pvalue": (other, np.where(ok, pvalue, np.nan)),
            "n_eff": (other, np.where(np.isfinite(y).all(axis=0), n_eff, np.nan)),
            "stderr": (other, np.where(ok, stderr, np.nan)),
        },
        coords=coords,
    )
    out.attrs = {"test": "least-squares trend, t-test" + (", Santer et al. (2000) effective sample size" if adjust else "")}
    return out


def trend_difference_test(a: xr.DataArray, b: xr.DataArray, *, dim: str = "year", adjust: bool = True) -> xr.Dataset:
    """Whether the least-squares trend of ``a`` differs from that of ``b``, at every other index (cell).

    Parameters
    ----------
    a, b
        Yearly season means ``(dim, ...)`` of a run and of a reference on one grid (the
        years need not be the same); the ``dim`` coordinate (numeric) is the abscissa.
    adjust
        Each slope's standard error with the Santer et al. (2000) lag-1 effective sample
        size of its own residuals (:func:`trend_test`); ``False``: the classical ones.

    Returns
    -------
    Dataset
        ``difference`` (slope of a minus slope of b, per unit of ``dim``), ``t``, ``dof``,
        ``pvalue`` (two-sided), ``n_eff_a`` and ``n_eff_b``.

    Notes
    -----
    ``t = (b_a - b_b) / sqrt(s_a² + s_b²)`` with ``s`` the slopes' standard errors (the
    ``d`` statistic of Santer et al. 2000 for two independent series), referred to
    Student's t with the Welch–Satterthwaite degrees of freedom
    ``(s_a² + s_b²)² / (s_a⁴ / (n'_a - 2) + s_b⁴ / (n'_b - 2))`` (Satterthwaite 1946,
    Welch 1947), ``n'`` the effective sizes: it lies between the smaller ``n' - 2`` and
    ``n'_a + n'_b - 4`` and does not overstate the degrees of freedom when one series is
    much noisier than the other.  The two series are taken as independent (a run's
    weather is not the observed weather); two series that share their weather (a
    reanalysis against observations) make the test conservative.  A cell that
    :func:`trend_test` cannot test in either series gets NaN; two perfect fits give 0
    for different slopes and NaN for equal ones.
    """
    b = b.transpose(*a.dims)  # the cells in a's order: the slopes are compared position by position
    fa, fb = trend_test(a, dim=dim, adjust=adjust), trend_test(b, dim=dim, adjust=adjust)
    va, vb = fa["stderr"].values ** 2, fb["stderr"].values ** 2
    diff = fa["slope"].values - fb["slope"].values
    with np.errstate(invalid="ignore", divide="ignore"):
        variance = va + vb
        dof = variance**2 / (va**2 / (fa["n_eff"].values - 2.0) + vb**2 / (fb["n_eff"].values - 2.0))
        t = diff / np.sqrt(variance)
        pvalue = np.where(variance > 0, 2.0 * special.stdtr(np.where(dof > 0, dof, 1.0), -np.abs(t)),
                          np.where(diff != 0, 0.0, np.nan))
    ok = np.isfinite(va) & np.isfinite(vb) & np.isfinite(diff)  # trend_test could fit both
    other = list(fa["slope"].dims)
    out = xr.Dataset(
        {
            "difference": (other, np.where(ok, diff, np.nan)),
            "t": (other, np.where(ok & (variance > 0), t, np.nan)),
            "dof": (other, np.where(ok & (variance > 0), dof, np.nan)),
            "pvalue": (other, np.where(ok, pvalue, np.nan)),
            "n_eff_a": fa["n_eff"].variable,
            "n_eff_b": fb["n_eff"].variable,
        },
        coords=fa.coords,
    )
    out.attrs = {"test": "difference of least-squares trends, t-test with both slopes' standard errors"
                 + (", Santer et al. (2000) effective sample sizes" if adjust else "") + ", Welch-Satterthwaite degrees of freedom"}
    return out


#: CF flag values of a significance mask (CF 1.10 section 3.5): cells not tested, tested
#: and not significant, significant under false-discovery-rate control.
FLAG_VALUES = (0, 1, 2)
FLAG_MEANINGS = "not_tested not_significant significant"


def significance_flags(significant: xr.DataArray, tested: xr.DataArray, *, name: str, long_name: str, level: float,
                       threshold: float, test: str) -> xr.DataArray:
    """A significance mask as a CF flag variable (byte, ``flag_values``/``flag_meanings``).

    Parameters
    ----------
    significant, tested
        Boolean masks (significant implies tested).
    name, long_name
        Variable name and its description.
    level, threshold, test
        The false-discovery level, the p-value threshold it gave and the test, kept as
        attributes.
    """
    flags = xr.where(significant & tested, 2, xr.where(tested, 1, 0)).astype("int8")
    flags.name = name
    flags.attrs = {
        "long_name": long_name,
        "flag_values": np.array(FLAG_VALUES, dtype="int8"),
        "flag_meanings": FLAG_MEANINGS,
        "fdr_level": float(level),
        "p_threshold": float(threshold),
        "comment": f"{test}; significant: Benjamini-Hochberg false discovery rate {level:g} over the tested cells (Wilks 2016)",
    }
    return flags
