"""The metric registry and the area-weighted pattern statistics.

All spatial statistics use one set of normalised weights ``w`` (cell area × region
fraction, zero where either field is missing, summing to one), so that the identities of
Taylor (2001) hold exactly:

    crmse² = σ_m² + σ_r² − 2 σ_m σ_r corr        (law of cosines)
    rmse²  = bias² + crmse²

Standard deviations and the correlation are weighted *population* statistics.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from dataclasses import dataclass

import numpy as np
import xarray as xr

from .errors import InputError
from .units import trend_units

__all__ = [
    "Metric",
    "METRICS",
    "weighted_mean",
    "common_mask",
    "pattern_stats",
    "taylor_skill",
    "relative_errors",
    "zonal_mean",
]


@dataclass(frozen=True)
class Metric:
    """A declared score: how it is labelled, its units and which direction is better.

    ``best`` is ``"high"``, ``"low"``, ``"zero"`` (smallest magnitude), ``"one"``
    (closest to one) or ``None`` (a descriptive number with no better direction).
    """

    name: str
    label: str
    units: Callable[[str], str]
    best: str | None
    description: str

    @property
    def higher_is_better(self) -> bool | None:
        return {"high": True, "low": False}.get(self.best or "", None)


def _same(u: str) -> str:
    return u


def _one(u: str) -> str:
    return "1"


METRICS: dict[str, Metric] = {
    m.name: m
    for m in (
        Metric("mean", "Run mean", _same, None, "area-weighted mean of the run's climatology"),
        Metric("ref_mean", "Reference mean", _same, None, "area-weighted mean of the reference climatology"),
        Metric("bias", "Bias", _same, "zero", "run mean minus reference mean"),
        Metric("rmse", "RMSE", _same, "low", "area-weighted root-mean-square difference of the climatologies"),
        Metric("crmse", "Centred RMSE", _same, "low", "RMS difference after removing each field's mean (Taylor 2001)"),
        Metric("corr", "Pattern correlation", _one, "high", "area-weighted Pearson correlation of the climatologies"),
        Metric("std_ratio", "Std ratio", _one, "one", "spatial standard deviation, run over reference"),
        Metric("taylor_skill", "Taylor skill", _one, "high", "Taylor (2001) eq. 4 skill score with R0 = 1"),
        Metric("trend", "Run trend", trend_units, None, "OLS trend of the regional-mean yearly series"),
        Metric("ref_trend", "Reference trend", trend_units, None, "OLS trend of the reference's regional-mean series"),
        Metric("trend_pvalue", "Trend p-value", _one, None, "t-test with effective sample size (Santer et al. 2000)"),
        Metric("ref_trend_pvalue", "Reference trend p-value", _one, None, "as trend_pvalue, for the reference"),
        Metric("iav_ratio", "IAV ratio", _one, "one", "interannual std of the detrended regional mean, run over reference"),
        Metric("rel_error", "Relative error", _one, "low", "(RMSE − median RMSE) / median RMSE across the runs (Gleckler et al. 2008)"),
        Metric("bias_signif_area", "Significant bias area", _one, None,
               "area fraction where run minus reference climatology stands out from interannual variability "
               "(t-test with Santer et al. 2000 effective sizes, Benjamini-Hochberg FDR 10 % over the map, Wilks 2016)"),
        Metric("rmse_diff_lo", "RMSE − best other, 95 % low", _same, None,
               "lower end of the 95 % moving-block bootstrap interval of RMSE minus the RMSE of the best other run"),
        Metric("rmse_diff_hi", "RMSE − best other, 95 % high", _same, None,
               "upper end of the 95 % moving-block bootstrap interval of RMSE minus the RMSE of the best other run"),
        Metric("abs_bias_diff_lo", "|Bias| − best other, 95 % low", _same, None,
               "lower end of the 95 % moving-block bootstrap interval of |bias| minus the |bias| of the best other run"),
        Metric("abs_bias_diff_hi", "|Bias| − best other, 95 % high", _same, None,
               "upper end of the 95 % moving-block bootstrap interval of |bias| minus the |bias| of the best other run"),
    )
}


def weighted_mean(da: xr.DataArray, weights: xr.DataArray, *, dims: tuple[str, ...] | None = None) -> xr.DataArray:
    """Weighted mean over ``dims`` (default: the dimensions of ``weights``, e.g. ``lat, lon``,
    ``y, x`` or ``cell`` for cell areas); NaN data get zero weight.

    Notes
    -----
    Returns NaN where no valid data carry weight (never divides by zero silently into a
    finite number).
    """
    dims = tuple(str(d) for d in weights.dims) if dims is None else dims
    w = weights.fillna(0.0)
    valid = da.notnull()
    num = (da.fillna(0.0) * w).sum(dims)
    den = (w * valid).sum(dims)
    return num / den.where(den > 0)


def common_mask(*fields: xr.DataArray) -> xr.DataArray:
    """True where every field has a value (one mask for run and reference)."""
    mask = fields[0].notnull()
    for f in fields[1:]:
        mask = mask & f.notnull()
    return mask


def taylor_skill(corr: float, std_ratio: float, *, r0: float = 1.0) -> float:
    """Taylor (2001, J. Geophys. Res. 106(D7), eq. 4) skill score.

    ``S = 4 (1 + R) / ((σ̂ + 1/σ̂)² (1 + R0))`` with σ̂ the ratio of standard deviations
    and R0 the highest attainable correlation (1 by default).
    """
    if not np.isfinite(std_ratio) or std_ratio <= 0 or not np.isfinite(corr):
        return float("nan")
    # (σ̂ + 1/σ̂)² = (1 + s²)²/s² with s = min(σ̂, 1/σ̂) (the score is symmetric in σ̂ and 1/σ̂):
    # s ≤ 1 cannot overflow, and a vanishing s gives the limit 0.  1 + R is never negative;
    # rounding can put a correlation of -1 a hair below it.
    s = min(std_ratio, 1.0 / std_ratio)
    return float(4.0 * max(1.0 + corr, 0.0) * s * s / ((1.0 + s * s) ** 2 * (1.0 + r0)))


def pattern_stats(
    model: xr.DataArray,
    reference: xr.DataArray,
    weights: xr.DataArray,
    *,
    where: str | None = None,
) -> dict[str, float]:
    """Area-weighted statistics of two fields on the same grid.

    Parameters
    ----------
    model, reference
        Climatological fields ``(lat, lon)`` (DataArrays or plain arrays of one shape).
    weights
        Non-negative weights ``(lat, lon)`` (cell area × region fraction); need not sum
        to one.
    where
        Used in the message when no valid cell remains.

    Returns
    -------
    dict
        ``mean ref_mean bias rmse crmse corr std ref_std std_ratio taylor_skill``.

    Notes
    -----
    Cells missing in either field are excluded from both.  Raises :class:`InputError`
    when no cell with positive weight remains.  A constant reference gives
    ``corr = std_ratio = taylor_skill = NaN``.
    """
    m = np.asarray(getattr(model, "values", model), dtype="float64")
    r = np.asarray(getattr(reference, "values", reference), dtype="float64")
    w = np.nan_to_num(np.asarray(getattr(weights, "values", weights), dtype="float64"), nan=0.0)
    valid = np.isfinite(m) & np.isfinite(r) & (w > 0)
    total = w[valid].sum()
    if not valid.any() or total <= 0:
        raise InputError(f"no valid cell in the selection{'' if where is None else ' (' + where + ')'}", remedy="choose another region, or check the masks of the two sources")
    w = np.where(valid, w, 0.0) / total
    m = np.where(valid, m, 0.0)
    r = np.where(valid, r, 0.0)
    mean_m = float((w * m).sum())
    mean_r = float((w * r).sum())
    dm, dr = m - mean_m, r - mean_r
    var_m = float((w * dm * dm).sum())
    var_r = float((w * dr * dr).sum())
    cov = float((w * dm * dr).sum())
    std_m, std_r = np.sqrt(var_m), np.sqrt(var_r)
    bias = mean_m - mean_r
    crmse = float(np.sqrt(max((w * (dm - dr) ** 2).sum(), 0.0)))
    rmse = float(np.sqrt((w * (m - r) ** 2).sum()))
    corr = cov / (std_m * std_r) if std_m > 0 and std_r > 0 else float("nan")
    ratio = std_m / std_r if std_r > 0 else float("nan")
    return {
        "mean": mean_m,
        "ref_mean": mean_r,
        "bias": bias,
        "rmse": rmse,
        "crmse": crmse,
        "corr": float(corr),
        "std": float(std_m),
        "ref_std": float(std_r),
        "std_ratio": float(ratio),
        "taylor_skill": taylor_skill(float(corr), float(ratio)),
    }


def relative_errors(rmse: Mapping[str, float]) -> dict[str, float]:
    """Gleckler et al. (2008, J. Geophys. Res. 113, D06104) normalised relative error.

    ``(E − median E) / median E`` across the runs of one comparison; NaN values are left
    out of the median; a zero median gives NaN.
    """
    values = np.array([v for v in rmse.values() if np.isfinite(v)], dtype="float64")
    if values.size == 0:
        return {k: float("nan") for k in rmse}
    med = float(np.median(values))
    if med == 0:
        return {k: float("nan") for k in rmse}
    return {k: (float(v) - med) / med if np.isfinite(v) else float("nan") for k, v in rmse.items()}


def zonal_mean(da: xr.DataArray, *, weights: xr.DataArray | None = None) -> xr.DataArray:
    """Mean along longitude weighted by cell width (NaN cells left out)."""
    if weights is None:
        from .grid import infer_bounds

        bounds = da["lon_bnds"].values if "lon_bnds" in da.coords else infer_bounds(da["lon"].values, kind="lon")
        width = np.abs(np.diff(bounds, axis=1))[:, 0]
        weights = xr.DataArray(width, dims="lon", coords={"lon": da["lon"].values})
    out = weighted_mean(da, weights, dims=("lon",))
    out.attrs = dict(da.attrs)
    return out
