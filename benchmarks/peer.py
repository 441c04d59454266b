"""A hand-tuned scoring script: what a practised user writes in an afternoon, for comparison.

    python benchmarks/peer.py --reference obs='refs/obs/*.nc' --model run-a='runs/a/*.nc' ... \
        --variable tas --period 1981-2010 --region global --region land --season ANN --season DJF \
        --output peer.csv

Loads each file once (xarray + netCDF4, no dask), brings every source onto the reference's
grid orientation (latitude ascending, longitude in [-180, 180)), and computes the
contract's metrics with numpy: area-weighted pattern statistics of the season
climatologies, OLS trends of the regional-mean yearly series with the Santer et al. (2000)
lag-1 adjustment, interannual variability ratio of the detrended series, and the relative
error of Gleckler et al. (2008).  Tuned like gridscore: one BLAS thread, p-values from
scipy.special (what scipy.stats.t.sf calls), no dask.

It handles only what the benchmark gives it: monthly files of one variable per source,
every source on the reference's grid (in any orientation), the land fraction in the
reference's files; no regridding, no levels; precipitation in mm day-1 and sea-level pressure in hPa.  benchmarks/run.py checks
that its numbers equal gridscore's.
"""

from __future__ import annotations

import os

os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")

import argparse  # noqa: E402
import csv  # noqa: E402
import glob  # noqa: E402

import numpy as np  # noqa: E402
import xarray as xr  # noqa: E402
from scipy.special import stdtr  # noqa: E402

MONTHS = {"ANN": range(1, 13), "DJF": (12, 1, 2), "MAM": (3, 4, 5), "JJA": (6, 7, 8), "SON": (9, 10, 11)}
BANDS = {"global": (-90, 90), "tropics": (-30, 30), "nh-extratropics": (30, 90), "sh-extratropics": (-90, -30),
         "arctic": (60, 90), "antarctic": (-90, -60), "land": (-90, 90), "ocean": (-90, 90)}
#: Units people read precipitation and sea-level pressure in: mm day-1 and hPa.
READ_IN = {"kg m-2 s-1": 86400.0, "Pa": 0.01}
METRICS = ("mean", "ref_mean", "bias", "rmse", "crmse", "corr", "std_ratio", "taylor_skill", "trend", "ref_trend",
           "trend_pvalue", "ref_trend_pvalue", "iav_ratio", "rel_error")


def load(pattern: str, variable: str) -> tuple[np.ndarray, np.ndarray, np.ndarray, xr.Dataset]:
    """Monthly values (time, lat, lon) float32, month lengths, (year, month), the dataset of the first file."""
    files = sorted(glob.glob(pattern))
    parts, land = [], None
    for f in files:
        ds = xr.open_dataset(f, decode_times=xr.coders.CFDatetimeCoder(use_cftime=True)).load()  # every value read once
        lat = next(n for n in ds.coords if ds[n].attrs.get("standard_name") == "latitude")
        lon = next(n for n in ds.coords if ds[n].attrs.get("standard_name") == "longitude")
        ds = ds.rename({lat: "lat", lon: "lon"})
        ds = ds.assign_coords(lon=((ds.lon + 180) % 360) - 180).sortby(["lat", "lon"])
        if variable in ds:
            parts.append(ds)
        if "sftlf" in ds:
            land = ds["sftlf"]
    ds = xr.concat(parts, "time") if len(parts) > 1 else parts[0]
    t = ds.indexes["time"]
    ym = np.array([(d.year, d.month) for d in t])
    values = ds[variable].values
    scale = READ_IN.get(ds[variable].attrs.get("units"))
    if scale is not None:
        values = values * scale  # in the stored precision, as the data are read
    return values, ds.time.dt.days_in_month.values.astype("float64"), ym, ds.assign(sftlf=land) if land is not None else ds


def season_years(values, days, ym, season, first, last):
    """{label year: month-length weighted mean over the season}, complete seasons only."""
    months = MONTHS[season]
    label = ym[:, 0] + ((ym[:, 1] == 12) & (season == "DJF"))
    out = {}
    for y in range(first, last + 1):
        idx = np.flatnonzero((label == y) & np.isin(ym[:, 1], months))
        if len(idx) == len(months):
            w = days[idx]
            out[y] = np.tensordot(w, values[idx].astype("float64"), axes=1) / w.sum()
    return out


def trend(y, x):
    """(slope, p-value): OLS with the Santer et al. (2000) effective sample size."""
    dx = x - x.mean()
    slope = np.dot(dx, y - y.mean()) / np.dot(dx, dx)
    e = y - (y.mean() - slope * x.mean() + slope * x)
    d = e - e.mean()
    r1 = np.dot(d[:-1], d[1:]) / np.dot(d, d)
    n_eff = len(y) * (1 - r1) / (1 + r1) if r1 > 0 else float(len(y))
    stderr = np.sqrt(np.dot(e, e) / (n_eff - 2) / np.dot(dx, dx))
    return slope, 2.0 * stdtr(n_eff - 2, -abs(slope / stderr))


def detrended_std(y, x):
    slope = np.polyfit(x, y, 1)
    return np.std(y - np.polyval(slope, x), ddof=1)


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--reference", required=True)
    ap.add_argument("--model", action="append", required=True)
    ap.add_argument("--variable", required=True)
    ap.add_argument("--period", required=True)
    ap.add_argument("--region", action="append", required=True)
    ap.add_argument("--season", action="append", required=True)
    ap.add_argument("--output", required=True)
    a = ap.parse_args()
    first, last = map(int, a.period.split("-"))
    ref_name, ref_glob = a.reference.split("=", 1)
    ref_vals, ref_days, ref_ym, ref_ds = load(ref_glob, a.variable)
    lat_b = np.deg2rad(ref_ds["lat_bnds"].values)
    lon_b = ref_ds["lon_bnds"].values
    area = (np.sin(lat_b[:, 1]) - np.sin(lat_b[:, 0]))[:, None] * (lon_b[:, 1] - lon_b[:, 0])[None, :]
    land = np.clip(np.nan_to_num(ref_ds["sftlf"].values.astype("float64") / 100.0), 0, 1) if "sftlf" in ref_ds else None
    fractions = {}
    for r in a.region:
        s, n = np.deg2rad(BANDS[r])
        inside = np.clip(np.sin(np.minimum(lat_b[:, 1], n)) - np.sin(np.maximum(lat_b[:, 0], s)), 0, None)
        f = np.repeat((inside / (np.sin(lat_b[:, 1]) - np.sin(lat_b[:, 0])))[:, None], area.shape[1], axis=1)
        fractions[r] = f * land if r == "land" else f * (1 - land) if r == "ocean" else f
    runs = {name: load(pattern, a.variable)[:3] for name, pattern in (m.split("=", 1) for m in a.model)}
    rows = []
    for season in a.season:
        ref_s = season_years(ref_vals, ref_days, ref_ym, season, first, last)
        results = {r: {} for r in a.region}
        for name, (vals, days, ym) in runs.items():
            run_s = season_years(vals, days, ym, season, first, last)
            years = np.array(sorted(set(run_s) & set(ref_s)), dtype="float64")
            m = np.stack([run_s[int(y)] for y in years]).reshape(len(years), -1)
            r_ = np.stack([ref_s[int(y)] for y in years]).reshape(len(years), -1)
            cm, cr = m.mean(0), r_.mean(0)
            mask = np.isfinite(cm) & np.isfinite(cr)
            m, r_ = np.where(mask, m, 0.0), np.where(mask, r_, 0.0)
            for region in a.region:
                w = area.ravel() * fractions[region].ravel() * mask
                wn = w / w.sum()
                mm, mr = (wn * np.where(mask, cm, 0)).sum(), (wn * np.where(mask, cr, 0)).sum()
                dm, dr = np.where(mask, cm, 0) - mm, np.where(mask, cr, 0) - mr
                sm, sr = np.sqrt((wn * dm * dm).sum()), np.sqrt((wn * dr * dr).sum())
                corr = (wn * dm * dr).sum() / (sm * sr)
                ratio = sm / sr
                s = min(ratio, 1 / ratio)
                ms, rs = m @ w / w.sum(), r_ @ w / w.sum()
                tm, tr = trend(ms, years), trend(rs, years)
                results[region][name] = {
                    "mean": mm, "ref_mean": mr, "bias": mm - mr,
                    "rmse": np.sqrt((wn * (np.where(mask, cm, 0) - np.where(mask, cr, 0)) ** 2).sum()),
                    "crmse": np.sqrt((wn * (dm - dr) ** 2).sum()), "corr": corr, "std_ratio": ratio,
                    "taylor_skill": 4 * (1 + corr) * s * s / ((1 + s * s) ** 2 * 2),
                    "trend": tm[0] * 10, "ref_trend": tr[0] * 10, "trend_pvalue": tm[1], "ref_trend_pvalue": tr[1],
                    "iav_ratio": detrended_std(ms, years) / detrended_std(rs, years),
                }
        for region in a.region:
            median = np.median([v["rmse"] for v in results[region].values()])
            for name, v in results[region].items():
                v["rel_error"] = (v["rmse"] - median) / median
                rows += [(name, ref_name, region, season, k, float(v[k])) for k in METRICS]
    with open(a.output, "w", newline="") as fh:
        out = csv.writer(fh)
        out.writerow(["model", "reference", "region", "season", "metric", "value"])
        out.writerows(rows)


if __name__ == "__main__":
    main()
