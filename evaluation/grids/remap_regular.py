"""Remapping between regular latitude-longitude grids.

Weights come from xarray-regrid's interval tools (conservative) and its linear method
(bilinear); this module prepares the grids (periodic longitude padding, exact bounds) so
that global grids map without gaps.
"""

from __future__ import annotations

from collections.abc import Hashable
from functools import lru_cache

import numpy as np
import xarray as xr

from .regular import infer_bounds

__all__ = ["conservative", "bilinear", "bounds_of"]


def _is_global_in_lon(lon_bnds: np.ndarray) -> bool:
    return abs(float(lon_bnds[-1, 1] - lon_bnds[0, 0]) - 360.0) < 1e-6


def _pad_periodic(da: xr.DataArray) -> xr.DataArray:
    """Copy the last/first longitude column to the other side (±360°).

    xarray-regrid masks target cells whose centre lies outside the source's outermost
    centres; a global source must wrap round instead, so the padding gives it a
    neighbour across the dateline.  Latitude gets a copy of each outermost row beyond the
    pole: that row's inferred interval lies entirely past ±90° so it adds no weight, it
    only keeps polar target cells from being masked.
    """
    lon = da["lon"].values
    left = da.isel(lon=[-1]).assign_coords(lon=[lon[-1] - 360.0])
    right = da.isel(lon=[0]).assign_coords(lon=[lon[0] + 360.0])
    padded = xr.concat([left, da, right], dim="lon", coords="minimal", compat="override", join="override")
    lat = padded["lat"].values
    if lat.size > 1:
        south = padded.isel(lat=[0]).assign_coords(lat=[lat[0] - (lat[1] - lat[0])])
        north = padded.isel(lat=[-1]).assign_coords(lat=[lat[-1] + (lat[-1] - lat[-2])])
        padded = xr.concat([south, padded, north], dim="lat", coords="minimal", compat="override", join="override")
    return padded


def bounds_of(grid: xr.Dataset | None, da: xr.DataArray | xr.Dataset, axis: str) -> np.ndarray:
    """Bounds of ``axis`` from ``grid``, else from ``da``, else inferred from the centres."""
    name = f"{axis}_bnds"
    if grid is not None and name in grid.coords:
        return np.asarray(grid[name].values, dtype="float64")
    if name in da.coords:
        return np.asarray(da[name].values, dtype="float64")
    return infer_bounds(da[axis].values, kind=axis)  # type: ignore[arg-type]


@lru_cache(maxsize=64)
def _overlaps(src_lat: bytes, src_lon: bytes, tgt_lat: bytes, tgt_lon: bytes) -> tuple[np.ndarray, np.ndarray]:
    """Latitude (in sin φ) and longitude interval overlaps, computed once per grid pair."""
    import pandas as pd
    from xarray_regrid import utils

    def bounds(raw: bytes) -> np.ndarray:
        return np.sort(np.frombuffer(raw, dtype="float64").reshape(-1, 2), axis=1)

    def intervals(b: np.ndarray) -> pd.IntervalIndex:
        return pd.IntervalIndex.from_arrays(b[:, 0], b[:, 1])

    mu_src = np.sin(np.deg2rad(bounds(src_lat)))
    mu_tgt = np.sin(np.deg2rad(bounds(tgt_lat)))
    w_lat = utils.overlap(intervals(mu_src), intervals(mu_tgt))
    src_lon_b, tgt_lon_b = bounds(src_lon), bounds(tgt_lon)
    w_lon = np.sum([utils.overlap(intervals(src_lon_b + shift), intervals(tgt_lon_b)) for shift in (-360.0, 0.0, 360.0)], axis=0)
    w_lat.setflags(write=False)
    w_lon.setflags(write=False)
    return w_lat, w_lon


def conservative(da: xr.DataArray, source_grid: xr.Dataset | None, target: xr.Dataset) -> xr.DataArray:
    """First-order conservative map between latitude-longitude grids.

    The map factorises into a latitude and a longitude matrix of interval overlaps,
    computed with xarray-regrid's own interval tools and applied with its NaN-aware
    ``apply_weights``.  What we add, and why: the latitude intervals are taken in
    sin(latitude) and from the files' real cell bounds, so each overlap is an exact
    area on the sphere (xarray-regrid's public ``conservative`` infers bounds from the
    centres and corrects for latitude per source cell, which moves the global mean by
    ~1e-4 between non-nested grids); and the longitude overlaps wrap round the globe.
    NaN source cells are skipped (a target cell is valid where any valid source area
    overlaps it); target cells no source cell overlaps are missing.
    """
    from xarray_regrid import utils
    from xarray_regrid.methods.conservative import apply_weights

    src_lat_b, src_lon_b = bounds_of(source_grid, da, "lat"), bounds_of(source_grid, da, "lon")
    tgt_lat_b, tgt_lon_b = bounds_of(target, target, "lat"), bounds_of(target, target, "lon")
    tgt_lat, tgt_lon = target["lat"].values, target["lon"].values
    da = da.drop_vars([c for c in ("lat_bnds", "lon_bnds", "cell_area") if c in da.coords])
    w_lat, w_lon = _overlaps(src_lat_b.tobytes(), src_lon_b.tobytes(), tgt_lat_b.tobytes(), tgt_lon_b.tobytes())
    covered_lat = w_lat.sum(axis=0) > 0
    covered_lon = w_lon.sum(axis=0) > 0
    dtype = np.result_type(np.float32, da.dtype)
    n_lat, n_lon = utils.normalize_overlap(w_lat).astype(dtype), utils.normalize_overlap(w_lon).astype(dtype)
    if da.chunks is None and da.dtype.kind == "f":
        others = [d for d in da.dims if d not in ("lat", "lon")]
        mean = _apply_in_memory(da.transpose(*others, "lat", "lon").values, n_lat, n_lon)
        mean[..., ~(covered_lat[:, None] & covered_lon[None, :])] = np.nan
        coords = {k: v for k, v in da.coords.items() if "lat" not in v.dims and "lon" not in v.dims}
        out = xr.DataArray(mean, dims=(*others, "lat", "lon"), coords={**coords, "lat": tgt_lat, "lon": tgt_lon}, name=da.name, attrs=da.attrs)
        return out.transpose(*da.dims)
    weights: dict[Hashable, xr.DataArray] = {
        "lat": utils.create_dot_dataarray(n_lat, "lat", tgt_lat, da["lat"].values),
        "lon": utils.create_dot_dataarray(n_lon, "lon", tgt_lon, da["lon"].values),
    }
    out = apply_weights(da, weights, skipna=True, nan_threshold=1.0)
    covered = xr.DataArray(covered_lat[:, None] & covered_lon[None, :], dims=("lat", "lon"), coords={"lat": tgt_lat, "lon": tgt_lon})
    return out.assign_coords(lat=tgt_lat, lon=tgt_lon).where(covered)


def _apply_in_memory(values: np.ndarray, w_lat: np.ndarray, w_lon: np.ndarray) -> np.ndarray:
    """xarray-regrid's ``apply_weights(da, weights, skipna=True, nan_threshold=1.0)`` for values
    in memory, with numpy and scipy.sparse: ``values`` (..., lat, lon) mapped to (..., target
    lat, target lon) by the (source, target) weights ``w_lat``/``w_lon``.

    Written by hand because of its cost, not its arithmetic: the same sums (the values with NaN
    as 0, and the valid fractions), the same division and threshold, without ``xr.dot``'s
    alignment, its ``einsum`` set-up and the weights' DataArrays on every call (a few decades
    of yearly means on a 2-4 degree grid: 17 ms a call before; the overview's five seasons of
    every variable make hundreds of calls).  The weights are interval overlaps: a target cell
    meets a few source cells of each axis, so they are applied as sparse matrices (CSR times
    dense), a few multiply-adds a value instead of one per source cell of the axis.  Agrees
    with the library to rounding (tests/test_grid.py compares both).
    """
    from scipy import sparse
    from xarray_regrid.methods.conservative import get_valid_threshold

    lat_t, lon_t = sparse.csr_array(w_lat.T), sparse.csr_array(w_lon.T)  # (target, source)
    values = values.astype(w_lat.dtype, copy=False)
    valid = ~np.isnan(values)
    total = _through(np.where(valid, values, 0), lat_t, lon_t)
    if values.ndim > 2 and (same := valid.reshape(-1, *valid.shape[-2:])).all(axis=0).sum() == same.any(axis=0).sum():
        # the same cells missing in every step (a land or sea mask): one map of valid fractions
        fraction = _through(valid[(0,) * (values.ndim - 2)].astype(w_lat.dtype), lat_t, lon_t)
    else:
        fraction = _through(valid.astype(w_lat.dtype), lat_t, lon_t)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(fraction >= get_valid_threshold(1.0), total / fraction, np.nan)


def _through(values: np.ndarray, lat_t, lon_t) -> np.ndarray:
    """``values`` (..., lat, lon) through the sparse (target, source) weights of each axis:
    (..., target lat, target lon), as two sparse-times-dense products."""
    *lead, n_lat, n_lon = values.shape
    rows = int(np.prod(lead, dtype=int))
    by_lon = (lon_t @ values.reshape(rows * n_lat, n_lon).T).T  # (rows * lat, target lon)
    by_lon = by_lon.reshape(rows, n_lat, -1).transpose(1, 0, 2).reshape(n_lat, -1)  # (lat, rows * target lon)
    by_lat = lat_t @ by_lon  # (target lat, rows * target lon)
    return np.ascontiguousarray(by_lat.reshape(lat_t.shape[0], rows, -1).transpose(1, 0, 2)).reshape(*lead, lat_t.shape[0], lon_t.shape[0])


def bilinear(da: xr.DataArray, source_grid: xr.Dataset | None, target: xr.Dataset) -> xr.DataArray:
    """Linear in latitude and longitude (xarray-regrid); NaN propagates; wraps round a global source."""
    import xarray_regrid  # noqa: F401  (registers the .regrid accessor)

    target_grid = xr.Dataset(coords={"lat": target["lat"].values, "lon": target["lon"].values})
    source = da.drop_vars([c for c in ("lat_bnds", "lon_bnds", "cell_area") if c in da.coords])
    if _is_global_in_lon(bounds_of(source_grid, da, "lon")):
        source = _pad_periodic(source)
    time_dim = "time" if "time" in source.dims else None
    return source.regrid.linear(target_grid, time_dim=time_dim)
