"""Cell geometry on the sphere and remapping between latitude-longitude grids.

Areas are exact for cells bounded by two meridians and two parallels:
``A = R² (sin φ_n − sin φ_s) (λ_e − λ_w)`` with R = 6 371 000 m (IUGG mean radius).
Remapping weights come from xarray-regrid (conservative and linear); this module only
prepares the grids (periodic longitude padding) so that global grids map without gaps.
"""

from __future__ import annotations

from functools import lru_cache
from typing import Literal

import numpy as np
import xarray as xr

from .errors import InputError

__all__ = [
    "EARTH_RADIUS",
    "REGRID_METHODS",
    "cell_area",
    "infer_bounds",
    "grid_of",
    "same_grid",
    "regrid",
]

EARTH_RADIUS = 6_371_000.0  # m, IUGG mean radius of the Earth
REGRID_METHODS = ("conservative", "bilinear")
RegridMethod = Literal["conservative", "bilinear"]


def infer_bounds(centres: np.ndarray, *, kind: Literal["lat", "lon"]) -> np.ndarray:
    """Cell bounds ``(n, 2)`` from cell centres, half-way between neighbours.

    The outer bounds are extrapolated by half a spacing; latitude bounds are clipped to
    ±90°, and an outer latitude bound that ends less than half a spacing short of a pole
    (Gaussian grids) is moved to the pole.  A single centre gets a cell of 1° (latitude) or the whole circle (longitude).
    """
    c = np.asarray(centres, dtype="float64")
    if c.size == 1:
        half = 0.5 if kind == "lat" else 180.0
        edges = np.array([c[0] - half, c[0] + half])
    else:
        mid = 0.5 * (c[:-1] + c[1:])
        edges = np.concatenate([[c[0] - (mid[0] - c[0])], mid, [c[-1] + (c[-1] - mid[-1])]])
        if kind == "lat":
            # Gaussian latitudes stop about a quarter cell short of the pole after the
            # half-spacing extrapolation; a row that close to the pole is the polar row,
            # so it reaches the pole (else a polar cap is missing from every area sum).
            for k, inner in ((0, mid[0]), (-1, mid[-1])):
                if 90.0 - abs(edges[k]) < abs(inner - c[k]):
                    edges[k] = np.sign(edges[k]) * 90.0
    if kind == "lat":
        edges = np.clip(edges, -90.0, 90.0)
    return np.stack([edges[:-1], edges[1:]], axis=1)


def cell_area(
    lat_bnds: np.ndarray | xr.DataArray,
    lon_bnds: np.ndarray | xr.DataArray,
    *,
    radius: float = EARTH_RADIUS,
    lat: xr.DataArray | np.ndarray | None = None,
    lon: xr.DataArray | np.ndarray | None = None,
) -> xr.DataArray:
    """Exact area (m²) of latitude-longitude cells on a sphere.

    Parameters
    ----------
    lat_bnds, lon_bnds
        Bounds in degrees, shape ``(nlat, 2)`` and ``(nlon, 2)``.
    radius
        Sphere radius in metres.
    lat, lon
        Cell-centre coordinates for the result; default: the bounds' mid-points.

    Notes
    -----
    The sum over a grid that tiles the globe is ``4πR²`` to rounding.  Bounds are taken
    as given (no sorting), the absolute value of each factor is used so that the order of
    the two bounds does not matter.
    """
    lat_b = np.deg2rad(np.asarray(lat_bnds, dtype="float64"))
    lon_b = np.deg2rad(np.asarray(lon_bnds, dtype="float64"))
    dmu = np.abs(np.sin(lat_b[:, 1]) - np.sin(lat_b[:, 0]))
    dlon = np.abs(lon_b[:, 1] - lon_b[:, 0])
    area = radius**2 * dmu[:, None] * dlon[None, :]
    lat_c = np.rad2deg(lat_b.mean(axis=1)) if lat is None else np.asarray(lat)
    lon_c = np.rad2deg(lon_b.mean(axis=1)) if lon is None else np.asarray(lon)
    return xr.DataArray(
        area,
        dims=("lat", "lon"),
        coords={"lat": lat_c, "lon": lon_c},
        name="cell_area",
        attrs={"units": "m2", "standard_name": "cell_area", "long_name": "area of grid cell"},
    )


def grid_of(obj: xr.DataArray | xr.Dataset) -> xr.Dataset:
    """The horizontal grid of a normalised object: lat, lon, their bounds and cell areas."""
    coords = {name: obj.coords[name] for name in ("lat", "lon", "lat_bnds", "lon_bnds", "cell_area") if name in obj.coords}
    return xr.Dataset(coords=coords)


def same_grid(a: xr.DataArray | xr.Dataset, b: xr.DataArray | xr.Dataset, *, atol: float = 1e-6) -> bool:
    """True when both objects sit on the same latitude-longitude centres."""
    return (
        a.sizes["lat"] == b.sizes["lat"]
        and a.sizes["lon"] == b.sizes["lon"]
        and bool(np.allclose(a["lat"].values, b["lat"].values, atol=atol))
        and bool(np.allclose(a["lon"].values, b["lon"].values, atol=atol))
    )


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


def _bounds(grid: xr.Dataset | None, da: xr.DataArray | xr.Dataset, axis: str) -> np.ndarray:
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
    w_lon = sum(utils.overlap(intervals(src_lon_b + shift), intervals(tgt_lon_b)) for shift in (-360.0, 0.0, 360.0))
    w_lat.setflags(write=False)
    w_lon.setflags(write=False)
    return w_lat, w_lon


def _conservative(
    da: xr.DataArray,
    src_lat_b: np.ndarray,
    src_lon_b: np.ndarray,
    tgt_lat_b: np.ndarray,
    tgt_lon_b: np.ndarray,
    tgt_lat: np.ndarray,
    tgt_lon: np.ndarray,
) -> xr.DataArray:
    """First-order conservative map between latitude-longitude grids.

    The map factorises into a latitude and a longitude matrix of interval overlaps,
    computed with xarray-regrid's own interval tools and applied with its NaN-aware
    ``apply_weights``.  What we add, and why: the latitude intervals are taken in
    sin(latitude) and from the files' real cell bounds, so each overlap is an exact
    area on the sphere (xarray-regrid's public ``conservative`` infers bounds from the
    centres and corrects for latitude per source cell, which moves the global mean by
    ~1e-4 between non-nested grids); and the longitude overlaps wrap round the globe.
    """
    from xarray_regrid import utils
    from xarray_regrid.methods.conservative import apply_weights

    w_lat, w_lon = _overlaps(src_lat_b.tobytes(), src_lon_b.tobytes(), tgt_lat_b.tobytes(), tgt_lon_b.tobytes())
    weights = {
        "lat": utils.create_dot_dataarray(utils.normalize_overlap(w_lat), "lat", tgt_lat, da["lat"].values),
        "lon": utils.create_dot_dataarray(utils.normalize_overlap(w_lon), "lon", tgt_lon, da["lon"].values),
    }
    dtype = np.result_type(np.float32, da.dtype)
    weights = {k: v.astype(dtype) for k, v in weights.items()}
    out = apply_weights(da, weights, skipna=True, nan_threshold=1.0)
    # target cells that no source cell overlaps are missing, not zero
    covered_lat = w_lat.sum(axis=0) > 0
    covered_lon = w_lon.sum(axis=0) > 0
    covered = xr.DataArray(covered_lat[:, None] & covered_lon[None, :], dims=("lat", "lon"), coords={"lat": tgt_lat, "lon": tgt_lon})
    return out.assign_coords(lat=tgt_lat, lon=tgt_lon).where(covered)


def regrid(
    da: xr.DataArray,
    target: xr.Dataset | xr.DataArray,
    *,
    method: RegridMethod = "conservative",
    source_grid: xr.Dataset | None = None,
) -> xr.DataArray:
    """Remap a normalised field onto the grid of ``target``.

    Parameters
    ----------
    da
        Field with ``lat``/``lon`` dimensions (canonical names, latitude ascending,
        longitude in [-180, 180)).  Other dimensions are carried along lazily.
    target
        Any normalised object; only its ``lat``, ``lon`` (and bounds/area) are used.
    source_grid
        The source's grid (:func:`grid_of`) when ``da`` does not carry ``lon_bnds``
        itself (a DataArray cannot); without either, bounds are inferred from centres.
    method
        ``"conservative"`` (area-weighted, the default; right for fluxes and means) or
        ``"bilinear"`` (linear in latitude and longitude; right for smooth fields when a
        conservative map is not wanted).

    Notes
    -----
    NaN cells are skipped by the conservative map (a target cell is valid where any
    valid source area overlaps it) and propagate through the bilinear one.  The result
    carries the target's grid coordinates, including ``cell_area``.
    """
    if method not in REGRID_METHODS:
        raise InputError(f"unknown regrid method '{method}'", remedy=f"use one of {', '.join(REGRID_METHODS)}")
    import xarray_regrid  # noqa: F401  (registers the .regrid accessor)

    target_grid = xr.Dataset(coords={"lat": target["lat"].values, "lon": target["lon"].values})
    source = da.drop_vars([c for c in ("lat_bnds", "lon_bnds", "cell_area") if c in da.coords])
    if source_grid is not None and "lon_bnds" in source_grid.coords:
        lon_bnds = source_grid["lon_bnds"].values
    elif "lon_bnds" in da.coords:
        lon_bnds = da["lon_bnds"].values
    else:
        lon_bnds = infer_bounds(da["lon"].values, kind="lon")
    time_dim = "time" if "time" in source.dims else None
    if method == "conservative":
        src_lat_b = _bounds(source_grid, da, "lat")
        src_lon_b = _bounds(source_grid, da, "lon")
        tgt_lat_b = _bounds(target if isinstance(target, xr.Dataset) else None, target, "lat")
        tgt_lon_b = _bounds(target if isinstance(target, xr.Dataset) else None, target, "lon")
        out = _conservative(da.drop_vars([c for c in ("lat_bnds", "lon_bnds", "cell_area") if c in da.coords]),
                            src_lat_b, src_lon_b, tgt_lat_b, tgt_lon_b, target["lat"].values, target["lon"].values)
    else:
        if _is_global_in_lon(lon_bnds):
            source = _pad_periodic(source)
        out = source.regrid.linear(target_grid, time_dim=time_dim)
    out = out.assign_coords(lat=target["lat"].values, lon=target["lon"].values)
    if "cell_area" in target.coords:
        out = out.assign_coords(cell_area=target.coords["cell_area"])
    out.attrs = dict(da.attrs)
    return out
