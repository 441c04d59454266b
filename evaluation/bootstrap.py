"""Whether one run's RMSE or bias really differs from another's: a moving-block bootstrap over years.

Two runs scored against one reference differ in RMSE partly by chance: the climatologies
are means of a few decades of yearly season means, and another set of years would give
other numbers.  A moving-block bootstrap (Künsch 1989) draws new sets of years in blocks,
so that the year-to-year persistence of the errors is kept; the **same** years are drawn
for every run and the reference, so the interval is one of a paired difference.  Each
draw recomputes the metrics on the climatology of the drawn years.

The block length comes from the lag-1 autocorrelation ``r1`` of the yearly regional-mean
error series by the implicit formula of Wilks (1997)::

    L = (n - L + 1) ** ((2/3) (1 - n'/n)),    n' = n (1 - r1) / (1 + r1)

(``L = 1``, the ordinary bootstrap, when ``r1 <= 0``).

Cost: a draw is a weight vector ``a`` over the ``n`` years (how often each year was
drawn, over ``n``).  The drawn climatology of the error is ``aᵀD`` with ``D`` the
``(year, cell)`` run-minus-reference field, so

    RMSE² = aᵀ G a,   G = Dᵀ diag(w) D / Σw        bias = aᵀ (D w / Σw)

The ``n × n`` matrix ``G`` is built once per run and region (``n² × cells`` operations;
the whole map and the latitude bands share one pass, :func:`row_grams`); each of the
:data:`RESAMPLES` draws then costs ``n²``, whatever the grid size.  This is exact, not an
approximation.

References
----------
Künsch, H. R. (1989): The jackknife and the bootstrap for general stationary
    observations.  Ann. Statist., 17, 1217-1241.
Wilks, D. S. (1997): Resampling hypothesis tests for autocorrelated fields.  J. Climate,
    10, 65-82.
"""

# Hand-written: scipy.stats.bootstrap resamples iid observations only, and the block
# bootstraps of other packages draw indices but cannot share one set of draws between
# several statistics built from n x n Gram matrices; drawing block indices is a few lines.

from __future__ import annotations

import functools
from collections.abc import Mapping
from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

if TYPE_CHECKING:
    import pandas as pd

__all__ = [
    "CONFIDENCE",
    "BEST_RULE",
    "GUARDED_BEST",
    "INTERVAL_METRICS",
    "RESAMPLES",
    "SEED",
    "ErrorMoments",
    "banded_error_moments",
    "block_weights",
    "confirmed_best",
    "difference_intervals",
    "error_moments",
    "expanded_tail",
    "lag1_autocorrelation",
    "resampled_scores",
    "row_grams",
    "wilks_block_length",
]

#: The tidy metrics of the intervals (:func:`difference_intervals`).
INTERVAL_METRICS = ("rmse_diff_lo", "rmse_diff_hi", "abs_bias_diff_lo", "abs_bias_diff_hi")
#: The metrics whose "best" marking an interval guards -> the interval's upper end, which
#: must lie below zero (relative error orders runs as RMSE does).
GUARDED_BEST = {"rmse": "rmse_diff_hi", "rel_error": "rmse_diff_hi", "bias": "abs_bias_diff_hi"}
#: Number of bootstrap draws.
RESAMPLES = 2000
#: Seed of the draws: the same request gives the same interval every time.
SEED = 19890601
#: Coverage of the intervals.
CONFIDENCE = 0.95
#: The rule, as the command line, the dashboard and the README state it.
BEST_RULE = (
    f"A run is marked best in RMSE and relative error only where the {CONFIDENCE * 100:g} % bootstrap interval of its RMSE "
    "minus the RMSE of the best other run lies wholly below zero (rmse_diff_hi < 0), and best in bias only "
    "where the interval of its |bias| minus the smallest |bias| of the other runs does (abs_bias_diff_hi < 0); "
    "otherwise no run is marked, because the difference is within the sampling noise of the years "
    f"(moving-block bootstrap over years, Künsch 1989, block length of Wilks 1997, {RESAMPLES} draws, fixed seed). "
    "The other runs are every run of the same kind scored against the same reference, also those not shown: "
    "single runs compete with single runs, ensemble means with ensemble means (a mean averages its members' "
    "weather away and would beat any single run)."
)


def expanded_tail(confidence: float, n_eff: float) -> float:
    """The tail probability of the expanded percentile interval (Hesterberg 2015).

    A percentile interval is too narrow in small samples; the expanded interval takes the
    quantiles ``α'/2`` and ``1 - α'/2`` with ``Φ⁻¹(1 - α'/2) = sqrt(n/(n-1)) t_{1-α/2, n-1}``.
    Here ``n`` is the effective size ``n'`` of the series (at least 3).

    Hesterberg, T. C. (2015): What teachers should know about the bootstrap.  Amer.
    Statistician, 69, 371-386.
    """
    # scipy.special's stdtrit and ndtr are what scipy.stats.t.ppf and norm.sf call; importing
    # scipy.stats would cost about 1 s of every score
    from scipy import special

    n = max(float(n_eff), 3.0)
    z = np.sqrt(n / (n - 1.0)) * special.stdtrit(n - 1.0, 1.0 - (1.0 - confidence) / 2.0)
    return float(special.ndtr(-z))


def lag1_autocorrelation(x: np.ndarray) -> float:
    """``sum(d_t d_t+1) / sum(d_t²)`` of the anomalies ``d`` about the mean (NaN without variance)."""
    x = np.asarray(x, dtype="float64")
    d = x - x.mean()
    denom = float(d @ d)
    if x.size < 3 or denom <= 0.0 or not np.isfinite(denom):
        return float("nan")
    return float(d[:-1] @ d[1:] / denom)


def wilks_block_length(n: int, r1: float) -> int:
    """Block length of Wilks (1997) for ``n`` years with lag-1 autocorrelation ``r1``.

    Notes
    -----
    The implicit equation ``L = (n - L + 1) ** ((2/3)(1 - n'/n))`` with the effective size
    ``n' = n (1 - r1)/(1 + r1)`` is solved by fixed-point iteration (the right-hand side
    changes slowly with ``L``) and rounded to the nearest whole year within ``[1, n]``.
    ``r1 <= 0`` or NaN gives ``n' = n`` and ``L = 1``.
    """
    if n < 1:
        raise ValueError("a block length needs at least one year")
    if not np.isfinite(r1) or r1 <= 0.0:
        return 1
    r1 = min(r1, 0.999)
    exponent = (2.0 / 3.0) * (1.0 - (1.0 - r1) / (1.0 + r1))
    length = 1.0
    for _ in range(100):
        new = max(n - length + 1.0, 1.0) ** exponent
        if abs(new - length) < 1e-10:
            break
        length = new
    return int(min(max(round(length), 1), n))


def block_weights(n: int, block: int, *, resamples: int = RESAMPLES, seed: int = SEED) -> np.ndarray:
    """Moving-block bootstrap draws as weights ``(resamples, n)``: how often each year was drawn, over ``n``.

    Notes
    -----
    Each draw joins ``ceil(n / block)`` blocks of ``block`` consecutive years whose first
    years are uniform over ``0 … n - block`` (Künsch 1989; the blocks do not wrap round)
    and keeps the first ``n`` years.  Each row sums to one.  ``numpy.random.default_rng(seed)``.
    """
    if not 1 <= block <= n:
        raise ValueError(f"the block length must lie in 1..{n}")
    rng = np.random.default_rng(seed)
    k = -(-n // block)
    starts = rng.integers(0, n - block + 1, size=(resamples, k))
    index = (starts[:, :, None] + np.arange(block)).reshape(resamples, k * block)[:, :n]
    flat = index + n * np.arange(resamples)[:, None]
    counts = np.bincount(flat.ravel(), minlength=resamples * n).reshape(resamples, n)
    return counts / float(n)


@functools.lru_cache(maxsize=16)
def _shared_draws(n: int, block: int, resamples: int, seed: int) -> np.ndarray:
    """:func:`block_weights`, read-only, made once per process for each ``(n, block)``: every
    region, season and reference of a request draws the same years (the same seed), and a
    request of 6 regions x 5 seasons made them 59 times for 7 distinct (years, block)."""
    draws = block_weights(n, block, resamples=resamples, seed=seed)
    draws.flags.writeable = False
    return draws


@dataclass(frozen=True)
class ErrorMoments:
    """What a bootstrap of one run's RMSE and bias against a reference needs (one region).

    Attributes
    ----------
    years
        The label years of the rows of ``D`` (the years run and reference share).
    gram
        ``Dᵀ diag(w) D / Σw`` ``(year, year)``: ``aᵀ gram a`` is the squared RMSE of the
        climatologies over the years drawn with weights ``a``.
    bias
        ``D w / Σw`` ``(year)``: the yearly area-weighted mean error; ``aᵀ bias`` is the bias.
    """

    years: np.ndarray
    gram: np.ndarray
    bias: np.ndarray

    def select(self, years: np.ndarray) -> ErrorMoments:
        """The moments restricted to ``years`` (a subset of :attr:`years`)."""
        index = np.searchsorted(self.years, years)
        return ErrorMoments(np.asarray(years), self.gram[np.ix_(index, index)], self.bias[index])


def error_moments(difference: np.ndarray, weights: np.ndarray, years: np.ndarray) -> ErrorMoments:
    """:class:`ErrorMoments` of a ``(year, cell)`` run-minus-reference field and cell weights.

    Cells with zero weight are left out; NaN in a cell of zero weight is allowed.
    """
    w = np.nan_to_num(np.asarray(weights, dtype="float64"), nan=0.0)
    keep = np.flatnonzero(w > 0)
    d = np.asarray(difference, dtype="float64")
    if keep.size and keep[-1] - keep[0] + 1 == keep.size:
        # the kept cells are one run (the whole map, a band of latitudes): a view, not a copy
        d, w = d[:, keep[0]:keep[-1] + 1], w[keep[0]:keep[-1] + 1]
    else:
        d, w = np.take(d, keep, axis=1), w[keep]  # row-major, as the view above (d[:, keep] is column-major)
    w = w / w.sum()
    # row-major throughout: the product, the BLAS product below and the yearly sums are about
    # a third faster than on column-major copies (the yearly sums then add the cells pairwise)
    dw = d * w
    # A BLAS product, 3-4x faster than numpy.einsum (which does not use BLAS) for these thin
    # (years x cells) products with one BLAS thread, which the gridscore command sets; a
    # threaded BLAS on a shared machine spent ~80x the CPU time (benchmarks/significance.py).
    return ErrorMoments(np.asarray(years, dtype="float64"), dw @ d.T, dw.sum(axis=1))


def row_grams(difference: np.ndarray, weights: np.ndarray, rows: int) -> np.ndarray:
    """``(row, year, year)``: each row's ``D_row diag(u_row) D_rowᵀ`` of a ``(year, cell)`` field
    whose cells are ``rows`` rows of equal length (a latitude-longitude map, row-major).

    A region whose weights are ``f[row] × u`` (a band of latitudes: its fraction of each
    cell depends on the row only) has the Gram matrix ``Σ f[row] G_row / Σw``
    (:func:`banded_error_moments`): one pass over the cells serves every such region,
    instead of one pass per region.  ``difference`` must be finite (0 times NaN is NaN).
    """
    n = difference.shape[0]
    d = np.asarray(difference, dtype="float64").reshape(n, rows, -1).transpose(1, 0, 2)  # (row, year, cell of the row)
    u = np.nan_to_num(np.asarray(weights, dtype="float64"), nan=0.0).reshape(rows, 1, -1)
    return np.matmul(d * u, d.transpose(0, 2, 1))


def banded_error_moments(grams: np.ndarray, row_fraction: np.ndarray, difference: np.ndarray, weights: np.ndarray,
                         years: np.ndarray) -> ErrorMoments:
    """:func:`error_moments` of a region whose cell weights ``weights`` are ``row_fraction[row]``
    times the weights ``grams`` were made with (:func:`row_grams`): the same matrices up to
    rounding (the sum over cells is taken row by row)."""
    w = np.nan_to_num(np.asarray(weights, dtype="float64"), nan=0.0)
    total = w.sum()
    gram = np.tensordot(np.asarray(row_fraction, dtype="float64"), grams, axes=1) / total
    return ErrorMoments(np.asarray(years, dtype="float64"), gram, np.asarray(difference, dtype="float64") @ w / total)


def resampled_scores(moments: ErrorMoments, draws: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """RMSE and bias of the climatologies over each draw (rows of ``draws``, weights over the years)."""
    squared = np.einsum("bj,bj->b", draws @ moments.gram, draws)
    return np.sqrt(np.clip(squared, 0.0, None)), draws @ moments.bias


def difference_intervals(
    runs: Mapping[str, ErrorMoments],
    *,
    resamples: int = RESAMPLES,
    seed: int = SEED,
    confidence: float = CONFIDENCE,
) -> dict[str, dict[str, float | str | int]]:
    """Bootstrap intervals of each run's RMSE and |bias| minus those of the best other run.

    Parameters
    ----------
    runs
        Per run, its :class:`ErrorMoments` against one reference for one region and season.
    resamples, seed, confidence
        Number of draws, seed, coverage.

    Returns
    -------
    dict
        Per run: ``rmse_diff_lo``, ``rmse_diff_hi`` (interval of RMSE(run) − RMSE(c)
        with ``c`` the other run of lowest RMSE), ``abs_bias_diff_lo``,
        ``abs_bias_diff_hi`` (interval of |bias(run)| − |bias(c')| with ``c'`` the other
        run of smallest |bias|), the competitors ``rmse_competitor`` and
        ``bias_competitor``, the block lengths ``rmse_block`` and ``bias_block`` (years)
        and ``years`` (how many years were drawn from).

    Notes
    -----
    Every run is drawn over the years all runs share, with one set of draws; the
    competitors are chosen on those years' climatologies, not anew in each draw.  For the
    best run the competitor is the runner-up, so an interval wholly below zero says the
    best is better than every other run by more than sampling noise.  For each pair the
    block length is :func:`wilks_block_length` of the lag-1 autocorrelation ``r1`` of the
    pair's yearly difference series: of the yearly area-mean errors for the bias, of the
    yearly area-mean squared errors for the RMSE; both runs and the reference are drawn
    over the same years.  The interval is the expanded percentile interval
    (:func:`expanded_tail`) with the effective size ``n (1 - r1)/(1 + r1)``.  Fewer than
    two runs, or fewer than three shared years, give an empty result.
    """
    names = list(runs)
    if len(names) < 2:
        return {}
    common = runs[names[0]].years
    for name in names[1:]:
        common = np.intersect1d(common, runs[name].years)
    n = common.size
    if n < 3:
        return {}
    moments = {k: runs[k].select(common) for k in names}
    point = {k: resampled_scores(m, np.full((1, n), 1.0 / n)) for k, m in moments.items()}
    draws: dict[int, np.ndarray] = {}
    drawn: dict[tuple[str, int], tuple[np.ndarray, np.ndarray]] = {}

    def interval(name: str, other: str, series: np.ndarray, pick: int) -> tuple[float, float, int]:
        # one block length per pair, from the persistence of the pair's yearly difference series
        r1 = lag1_autocorrelation(series)
        block = wilks_block_length(n, r1)
        if block not in draws:
            draws[block] = _shared_draws(n, block, resamples, seed)
        for k in (name, other):
            if (k, block) not in drawn:
                drawn[(k, block)] = resampled_scores(moments[k], draws[block])
        a, b = drawn[(name, block)][pick], drawn[(other, block)][pick]
        diff = a - b if pick == 0 else np.abs(a) - np.abs(b)
        n_eff = n * (1.0 - r1) / (1.0 + r1) if np.isfinite(r1) and r1 > 0 else float(n)
        tail = 100.0 * expanded_tail(confidence, n_eff)
        lo, hi = np.percentile(diff, [tail, 100.0 - tail])
        return float(lo), float(hi), block

    out: dict[str, dict[str, float | str | int]] = {}
    for name in names:
        others = [k for k in names if k != name]
        by_rmse = min(others, key=lambda k: float(point[k][0][0]))
        by_bias = min(others, key=lambda k: abs(float(point[k][1][0])))
        lo_r, hi_r, block_r = interval(name, by_rmse, np.diag(moments[name].gram) - np.diag(moments[by_rmse].gram), 0)
        lo_b, hi_b, block_b = interval(name, by_bias, moments[name].bias - moments[by_bias].bias, 1)
        out[name] = {
            "rmse_diff_lo": lo_r,
            "rmse_diff_hi": hi_r,
            "abs_bias_diff_lo": lo_b,
            "abs_bias_diff_hi": hi_b,
            "rmse_competitor": by_rmse,
            "bias_competitor": by_bias,
            "rmse_block": block_r,
            "bias_block": block_b,
            "years": n,
        }
    return out


def confirmed_best(table: pd.DataFrame) -> pd.DataFrame:
    """The runs marked best by :data:`BEST_RULE` in a tidy score table.

    Returns
    -------
    DataFrame
        Columns ``reference variable level region season period metric model``: one row
        per metric of :data:`GUARDED_BEST` and case where a run's interval lies wholly
        below zero (at most one run per case: the interval is against the best other run).
    """
    import pandas as pd

    keys = ["reference", "variable", "level", "region", "season", "period"]
    columns = [*keys, "metric", "model"]
    upper = table[table["metric"].isin(set(GUARDED_BEST.values()))]
    rows = []
    for metric, bound in GUARDED_BEST.items():
        below = upper[(upper["metric"] == bound) & (pd.to_numeric(upper["value"], errors="coerce") < 0)]
        for _, r in below.iterrows():
            if ((table["metric"] == metric) & (table["model"] == r["model"])).any():
                rows.append((*(r[k] for k in keys), metric, r["model"]))
    return pd.DataFrame(rows, columns=columns)
