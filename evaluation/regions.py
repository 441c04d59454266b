"""Regions as a fractional weight per grid cell.

A region is never a hard cut: a cell half inside a latitude band counts half (by area,
i.e. by the difference of the sines of its latitude bounds), a cell that is 30 % land
counts 0.3 towards ``land`` and 0.7 towards ``ocean``.  Boxes ``box:S,N,W,E`` may cross
the dateline (W > E, e.g. ``box:-5,5,160,-150``).

On a regular grid the latitude and longitude fractions are exact (cells are bounded by
parallels and meridians).  On rotated, curvilinear and unstructured grids a cell is not
bounded by parallels, so bands and boxes count a cell wholly when its true centre lies
inside (centre-in-region), and the land fraction is the bundled one interpolated
bilinearly to the cell centres.  Scores are computed on the regular target grid, where
the exact fractions apply; the native-grid weights serve checks and native-grid means.
"""

from __future__ import annotations

from functools import lru_cache
from importlib import resources

import numpy as np
import xarray as xr

# region ids are plain text rules, kept importable without numpy (the warm cached path)
from .request import REGIONS, Region, parse_region

__all__ = ["Region", "REGIONS", "parse_region", "region_label", "region_weights", "land_fraction", "bundled_land_fraction"]


def _lat_fraction(lat_bnds: np.ndarray, south: float, north: float) -> np.ndarray:
    """Area fraction of each latitude row inside [south, north]."""
    lo, hi = np.deg2rad(lat_bnds[:, 0]), np.deg2rad(lat_bnds[:, 1])
    s, n = np.deg2rad(south), np.deg2rad(north)
    inside = np.clip(np.sin(np.minimum(hi, n)) - np.sin(np.maximum(lo, s)), 0.0, None)
    return inside / (np.sin(hi) - np.sin(lo))


def _lon_fraction(lon_bnds: np.ndarray, west: float, east: float) -> np.ndarray:
    """Fraction of each longitude column inside the arc from ``west`` eastwards to ``east``."""
    width = (east - west) % 360.0
    if width == 0.0:
        width = 360.0
    lo, hi = lon_bnds[:, 0], lon_bnds[:, 1]
    total = np.zeros(lo.size)
    for shift in (-720.0, -360.0, 0.0, 360.0, 720.0):
        a, b = west + shift, west + shift + width
        total += np.clip(np.minimum(hi, b) - np.maximum(lo, a), 0.0, None)
    return np.clip(total / (hi - lo), 0.0, 1.0)


def region_weights(region: str | Region, grid: xr.Dataset | xr.DataArray, *, land: xr.DataArray | None = None) -> xr.DataArray:
    """Fraction (0…1) of each cell's area that belongs to ``region``.

    Parameters
    ----------
    region
        Region id, ``box:S,N,W,E`` or a :class:`Region`.
    grid
        Normalised object carrying ``lat_bnds`` and ``lon_bnds``.
    land
        Land fraction (0…1) on the same grid, needed for ``land``/``ocean``; default the
        bundled land fraction remapped to the grid.

    Notes
    -----
    Multiply by ``cell_area`` to get area weights.  NaN never occurs: cells outside the
    region have weight 0.
    """
    r = parse_region(region)
    if "lat" not in grid.dims:
        return _centre_weights(r, grid, land)
    lat_f = _lat_fraction(np.asarray(grid["lat_bnds"].values, dtype="float64"), r.south, r.north)
    lon_f = _lon_fraction(np.asarray(grid["lon_bnds"].values, dtype="float64"), r.west, r.east)
    frac = xr.DataArray(lat_f[:, None] * lon_f[None, :], dims=("lat", "lon"), coords={"lat": grid["lat"].values, "lon": grid["lon"].values})
    if r.surface is not None:
        lf = land_fraction(grid) if land is None else land
        lf = lf.fillna(0.0).clip(0.0, 1.0)
        frac = frac * (lf.values if r.surface == "land" else 1.0 - lf.values)
    frac.name = "region_fraction"
    frac.attrs = {"long_name": f"fraction of cell in region {r.id}", "units": "1"}
    return frac


def _centre_weights(r: Region, grid: xr.Dataset | xr.DataArray, land: xr.DataArray | None) -> xr.DataArray:
    """Centre-in-region weights on a grid with 2-D or per-cell coordinates."""
    lat, lon = np.asarray(grid["lat"].values, dtype="float64"), np.asarray(grid["lon"].values, dtype="float64")
    inside_lat = (lat >= r.south) & (lat <= r.north)
    width = (r.east - r.west) % 360.0 or 360.0
    inside_lon = ((lon - r.west) % 360.0) <= width
    frac = xr.DataArray((inside_lat & inside_lon).astype("float64"), dims=grid["lat"].dims)
    if r.surface is not None:
        lf = land_fraction(grid) if land is None else land
        lf = np.clip(np.nan_to_num(np.asarray(lf.values, dtype="float64")), 0.0, 1.0)
        frac = frac * (lf if r.surface == "land" else 1.0 - lf)
    frac.name = "region_fraction"
    frac.attrs = {"long_name": f"fraction of cell in region {r.id} (cell centre inside)", "units": "1"}
    return frac


def _land_at_centres(grid: xr.Dataset | xr.DataArray) -> xr.DataArray:
    """The bundled land fraction interpolated bilinearly (scipy) to 2-D or per-cell centres."""
    from scipy.interpolate import RegularGridInterpolator

    src = bundled_land_fraction()["sftlf"].astype("float64")
    values = np.asarray(src.values)
    if str(src.attrs.get("units", "1")).strip() in ("%", "percent"):
        values = values / 100.0
    lat_s, lon_s = src["lat"].values, src["lon"].values
    # one column copied across the dateline on each side, so every longitude lies inside
    lon_p = np.concatenate([[lon_s[-1] - 360.0], lon_s, [lon_s[0] + 360.0]])
    values = np.concatenate([values[:, -1:], values, values[:, :1]], axis=1)
    interp = RegularGridInterpolator((lat_s, lon_p), values, bounds_error=False, fill_value=None)
    lat, lon = np.asarray(grid["lat"].values, dtype="float64"), np.asarray(grid["lon"].values, dtype="float64")
    out = interp(np.stack([lat.ravel(), lon.ravel()], axis=-1)).reshape(lat.shape)
    return xr.DataArray(np.clip(out, 0.0, 1.0), dims=grid["lat"].dims)


@lru_cache(maxsize=1)
def bundled_land_fraction() -> xr.Dataset:
    """The 1° land fraction that ships with the package (see scripts/make_land_fraction.py)."""
    from .io import _OPEN_LOCK, normalise

    ref = resources.files("evaluation") / "data" / "land_fraction_1deg.nc"
    # under the core's open lock: netCDF-C is not thread-safe, and a server reads this file
    # while other files are being opened on another thread
    with resources.as_file(ref) as path, _OPEN_LOCK:
        with xr.open_dataset(path) as ds:
            loaded = ds.load()
    return normalise(loaded, source=str(path))


_LAND_CACHE: dict[tuple, xr.DataArray] = {}


def land_fraction(grid: xr.Dataset | xr.DataArray) -> xr.DataArray:
    """The bundled land fraction remapped conservatively onto ``grid`` (0…1); on a grid
    that is not regular, interpolated bilinearly to the cell centres."""
    if "lat" not in grid.dims:
        return _land_at_centres(grid)
    key = (tuple(np.round(grid["lat"].values, 6)), tuple(np.round(grid["lon"].values, 6)))
    if key not in _LAND_CACHE:
        from .grids import regrid, same_grid

        src = bundled_land_fraction()
        lf = src["sftlf"].astype("float64")
        if str(lf.attrs.get("units", "1")).strip() in ("%", "percent"):
            lf = lf / 100.0
        out = lf if same_grid(lf, grid) else regrid(lf, grid, method="conservative")
        out = out.fillna(0.0).clip(0.0, 1.0)
        if len(_LAND_CACHE) > 32:
            _LAND_CACHE.clear()
        _LAND_CACHE[key] = out.drop_vars([c for c in out.coords if c not in ("lat", "lon")])
    return _LAND_CACHE[key]


def region_label(region: str | Region) -> str:
    """The one label of a region that every view, plot title, table and export shows.

    ``Arctic (60°N–90°N)``, ``Global land``, ``Box 10°S–10°N, 160°E–150°W``: the predefined
    regions by name and latitudes, a box by its edges; never the bare id (``arctic``).
    Raises :class:`~evaluation.errors.InputError` for text that is no region.
    """
    return parse_region(region).label
