"""Curvilinear grids: 2-D latitude and longitude on two index dimensions.

Found through a data variable's ``coordinates`` attribute (the CF way to name auxiliary
coordinates), else any 2-D variable whose ``standard_name`` or ``units`` say latitude
(and the matching longitude on the same dimensions).  The index dimension along which
latitude changes most becomes ``y``.  Canonical form: dimensions ``y``, ``x``; ``lat(y,
x)``, ``lon(y, x)`` in degrees (longitude in [-180, 180)); corners ``lat_bnds``/``lon_bnds
(y, x, 4)`` from the CF ``bounds`` of the coordinates, else inferred from the centres
(:func:`~evaluation.grids.spherical.corners_from_centres`); ``cell_area (y, x)`` from
``cell_measures`` when given, else the area of the great-circle quadrilateral.
"""

from __future__ import annotations

import numpy as np
import xarray as xr

from ..errors import InputError
from .description import GridDescription, attr
from .regular import LAT_UNITS, LON_UNITS, unit_key
from .spherical import corners_from_centres, polygon_area, wrap_lon

__all__ = ["find", "canonical", "is_latitude", "is_longitude"]


def is_latitude(var: xr.Variable | xr.DataArray) -> bool:
    return attr(var, "standard_name") == "latitude" or unit_key(attr(var, "units")) in LAT_UNITS


def is_longitude(var: xr.Variable | xr.DataArray) -> bool:
    return attr(var, "standard_name") == "longitude" or unit_key(attr(var, "units")) in LON_UNITS


def _named_coordinates(ds: xr.Dataset) -> list[str]:
    """Variables named in the data variables' ``coordinates`` attributes, in order."""
    names: list[str] = []
    for var in ds.data_vars.values():
        for n in (attr(var, "coordinates") or "").split():
            if n in ds.variables and n not in names:
                names.append(n)
    return names


def find(ds: xr.Dataset) -> GridDescription | None:
    """A curvilinear grid (2-D latitude and longitude on the same two dimensions), or None."""
    named = _named_coordinates(ds)
    others = [str(n) for n in ds.variables if n not in named]
    for pool, how in ((named, "named in the 'coordinates' attribute"), (others, "found by units/standard_name")):
        lats = [n for n in pool if ds[n].ndim == 2 and is_latitude(ds.variables[n])]
        lons = [n for n in pool if ds[n].ndim == 2 and is_longitude(ds.variables[n])]
        for lat in lats:
            for lon in lons:
                if set(ds[lon].dims) == set(ds[lat].dims):
                    y, x = _yx(ds, lat)
                    return GridDescription(
                        kind="curvilinear",
                        dims=(y, x),
                        shape=(int(ds.sizes[y]), int(ds.sizes[x])),
                        lat=lat,
                        lon=lon,
                        how=f"2-D latitude '{lat}' and longitude '{lon}' on ({y}, {x}), {how}",
                    )
    return None


def _yx(ds: xr.Dataset, lat: str) -> tuple[str, str]:
    """(y, x): y is the index dimension along which latitude changes most."""
    values = np.asarray(ds[lat].values, dtype="float64")
    d0, d1 = ds[lat].dims
    along0 = np.nanmean(np.abs(np.diff(values, axis=0))) if values.shape[0] > 1 else 0.0
    along1 = np.nanmean(np.abs(np.diff(values, axis=1))) if values.shape[1] > 1 else 0.0
    return (str(d0), str(d1)) if along0 >= along1 else (str(d1), str(d0))


def _given_corners(raw: xr.Dataset, desc: GridDescription) -> tuple[np.ndarray, np.ndarray] | None:
    names = [attr(raw[n], "bounds") for n in (desc.lat, desc.lon)]
    if not all(n and n in raw.variables for n in names):
        return None
    out = []
    for n in names:
        b = raw[n]
        vdim = [d for d in b.dims if d not in desc.dims]
        if b.ndim != 3 or len(vdim) != 1 or b.sizes[vdim[0]] != 4:
            return None
        out.append(np.asarray(b.transpose(*desc.dims, vdim[0]).values, dtype="float64"))
    return out[0], out[1]


def canonical(out: xr.Dataset, raw: xr.Dataset, desc: GridDescription) -> xr.Dataset:
    """Centres, corners and areas for ``out`` (already on dims ``y``/``x``)."""
    lat = np.asarray(raw[desc.lat].transpose(*desc.dims).values, dtype="float64")
    lon = wrap_lon(raw[desc.lon].transpose(*desc.dims).values)
    corners = _given_corners(raw, desc)
    if corners is None:
        if min(desc.shape) < 2:
            raise InputError(
                f"the curvilinear grid {desc.summary()} is one cell wide and has no cell bounds, so its cell areas are unknown",
                file=raw.encoding.get("source"),
                remedy="give the latitude/longitude a CF 'bounds' variable (4 vertices per cell)",
            )
        lon_v, lat_v = corners_from_centres(lon, lat)
        how = "inferred from the centres"
    else:
        lat_v, lon_v = corners
        lon_v = wrap_lon(lon_v)
        how = "from the bounds variables"
    if "cell_area" in out.coords:
        area = np.asarray(out["cell_area"].transpose("y", "x").values, dtype="float64")
    else:
        area = polygon_area(lon_v, lat_v)
    return out.assign_coords(
        lat=(("y", "x"), lat, {"standard_name": "latitude", "units": "degrees_north", "bounds": "lat_bnds"}),
        lon=(("y", "x"), lon, {"standard_name": "longitude", "units": "degrees_east", "bounds": "lon_bnds"}),
        lat_bnds=(("y", "x", "nv4"), lat_v, {"comment": f"cell corners {how}"}),
        lon_bnds=(("y", "x", "nv4"), lon_v, {"comment": f"cell corners {how}"}),
        cell_area=(("y", "x"), area, {"units": "m2", "standard_name": "cell_area"}),
    )
