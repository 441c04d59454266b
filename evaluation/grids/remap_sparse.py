"""Applying a sparse remapping matrix to fields on any grid kind.

Every map from a rotated, curvilinear or unstructured grid onto a regular target is a
sparse matrix ``W (target cells × source cells)`` of non-negative weights; the target
value is ``Σ W v / Σ W`` over the valid source cells, so missing source cells are left out
and a target cell that no valid source cell reaches is missing.  Only the weights differ
between methods (remap_polygons, remap_points).
"""

from __future__ import annotations

import hashlib
from collections.abc import Callable

import numpy as np
import scipy.sparse as sp
import xarray as xr

__all__ = ["apply_matrix", "cached", "SOURCE_GRID_COORDS"]

SOURCE_GRID_COORDS = ("lat", "lon", "lat_bnds", "lon_bnds", "cell_area", "y", "x", "y_bnds", "x_bnds", "crs")

_CACHE: dict[str, sp.csr_matrix] = {}


def cached(key_arrays: tuple, build: Callable[[], sp.csr_matrix]) -> sp.csr_matrix:
    """``build()`` once per distinct input arrays (weights are reused for every season and run)."""
    h = hashlib.sha1()
    for a in key_arrays:
        a = np.asarray(a)
        h.update(str(a.shape).encode() + str(a.dtype).encode())
        h.update(np.ascontiguousarray(a).tobytes())
    key = h.hexdigest()
    if key not in _CACHE:
        if len(_CACHE) > 16:
            _CACHE.clear()
        _CACHE[key] = build()
    return _CACHE[key]


def apply_matrix(da: xr.DataArray, weights: sp.csr_matrix, source_dims: tuple[str, ...], target: xr.Dataset) -> xr.DataArray:
    """``Σ W v / Σ W`` over valid source cells, onto the target's ``lat``/``lon``.

    Notes
    -----
    NaN source cells are skipped; target cells with no valid weight are NaN.  Dimensions
    other than the horizontal ones are kept (lazily, when ``da`` is a dask array).
    """
    nlat, nlon = target.sizes["lat"], target.sizes["lon"]
    nsrc = int(np.prod([da.sizes[d] for d in source_dims]))

    def kernel(x: np.ndarray) -> np.ndarray:
        lead = x.shape[: x.ndim - len(source_dims)]
        flat = np.asarray(x, dtype="float64").reshape(-1, nsrc).T
        valid = np.isfinite(flat)
        num = weights @ np.where(valid, flat, 0.0)
        den = weights @ valid.astype("float64")
        with np.errstate(invalid="ignore", divide="ignore"):
            out = np.where(den > 0, num / den, np.nan)
        return out.T.reshape(*lead, nlat, nlon)

    src = da.drop_vars([c for c in SOURCE_GRID_COORDS if c in da.coords])
    # a regular source's dims are the target's names: give them others for the core dims
    src = src.rename({d: f"source_{d}" for d in source_dims})
    source_dims = tuple(f"source_{d}" for d in source_dims)
    if src.chunks is not None:
        src = src.chunk({d: -1 for d in source_dims})
    out = xr.apply_ufunc(
        kernel,
        src,
        input_core_dims=[list(source_dims)],
        output_core_dims=[["lat", "lon"]],
        dask="parallelized",
        output_dtypes=["float64"],
        dask_gufunc_kwargs={"output_sizes": {"lat": nlat, "lon": nlon}},
    )
    return out.assign_coords(lat=target["lat"].values, lon=target["lon"].values)
