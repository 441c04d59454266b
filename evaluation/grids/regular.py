"""Regular latitude-longitude grids: 1-D latitude and longitude, each its own dimension.

Found by CF attributes (``standard_name``, then ``axis``, then ``units``), never by name.
Canonical form: dimensions ``lat`` (ascending) and ``lon`` (in [-180, 180), ascending),
bounds ``lat_bnds (lat, nv)``/``lon_bnds (lon, nv)`` from the ``bounds`` attribute or
inferred half-way between centres, and ``cell_area (lat, lon)`` in m², exact on the
sphere: ``A = R² (sin φ_n − sin φ_s) (λ_e − λ_w)``.
"""

from __future__ import annotations

from typing import Literal

import numpy as np
import xarray as xr

from .description import GridDescription, attr
from .spherical import EARTH_RADIUS

__all__ = ["LAT_UNITS", "LON_UNITS", "unit_key", "find", "find_axis", "infer_bounds", "cell_area", "canonical"]

# CF criteria as plain tables (cf-conventions 1.10, sections 4.1-4.2).  Units are compared
# after lower-casing and turning spaces into underscores ("degrees north" is a common
# misspelling of degrees_north with no other reading).
LAT_UNITS = {"degrees_north", "degree_north", "degree_n", "degrees_n", "degreen", "degreesn"}
LON_UNITS = {"degrees_east", "degree_east", "degree_e", "degrees_e", "degreee", "degreese"}
_CRITERIA = {
    "lat": {"standard_name": "latitude", "axis": "Y", "units": LAT_UNITS},
    "lon": {"standard_name": "longitude", "axis": "X", "units": LON_UNITS},
}
# standard names of axes that look like latitude/longitude but are not geographic
NOT_GEOGRAPHIC = {"grid_latitude", "grid_longitude", "projection_x_coordinate", "projection_y_coordinate"}


def unit_key(units: str | None) -> str:
    return "" if units is None else "_".join(units.strip().lower().split())


def find_axis(ds: xr.Dataset, axis: Literal["lat", "lon"]) -> str | None:
    """Name of the 1-D dimension coordinate CF attributes identify as latitude or longitude.

    ``standard_name`` first, then ``axis``, then ``units``; coordinates whose standard_name
    says they are rotated or projected (``grid_latitude`` …) never qualify.
    """
    rules = _CRITERIA[axis]
    candidates = [
        name
        for name, var in ds.variables.items()  # not ds[name]: see io.find_axis
        if var.ndim == 1 and var.dims[0] == name and attr(var, "standard_name") not in NOT_GEOGRAPHIC
    ]
    for key in ("standard_name", "axis", "units"):
        for name in candidates:
            value = attr(ds.variables[name], key)
            if value is None:
                continue
            if key == "standard_name" and value == rules["standard_name"]:
                return str(name)
            if key == "axis" and value.upper() == rules["axis"]:
                return str(name)
            if key == "units" and unit_key(value) in rules["units"]:
                return str(name)
    return None


def find(ds: xr.Dataset) -> GridDescription | None:
    """A regular grid: 1-D latitude and longitude dimension coordinates."""
    lat, lon = find_axis(ds, "lat"), find_axis(ds, "lon")
    if lat is None or lon is None:
        return None
    return GridDescription(
        kind="regular",
        dims=(lat, lon),
        shape=(int(ds.sizes[lat]), int(ds.sizes[lon])),
        lat=lat,
        lon=lon,
        how=f"1-D latitude '{lat}' and longitude '{lon}' (CF attributes)",
    )


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


def _bounds_for(raw: xr.Dataset, name: str, *, kind: Literal["lat", "lon"]) -> np.ndarray:
    """Bounds ``(n, 2)`` from the variable named by the ``bounds`` attribute, else inferred."""
    bname = attr(raw[name], "bounds")
    if bname and bname in raw.variables:
        b = np.asarray(raw[bname].values, dtype="float64")
        if b.ndim == 2 and b.shape == (raw.sizes[name], 2):
            return b
    return infer_bounds(raw[name].values, kind=kind)


def canonical(out: xr.Dataset, raw: xr.Dataset, desc: GridDescription) -> xr.Dataset:
    """Orient ``out`` (already on dims ``lat``/``lon``) and give it bounds and cell areas.

    ``raw`` is the dataset as read (file names), for bounds variables.  A ``cell_area``
    coordinate already on ``out`` (from ``cell_measures``) is kept and reordered with
    the data; otherwise the exact area is computed from the bounds.
    """
    lat_b = _bounds_for(raw, desc.lat, kind="lat")
    lon_b = _bounds_for(raw, desc.lon, kind="lon")
    lat = np.asarray(raw[desc.lat].values, dtype="float64")
    if lat.size > 1 and lat[0] > lat[-1]:
        out = out.isel(lat=slice(None, None, -1))
        lat_b, lat = lat_b[::-1], lat[::-1]
    lat_b = np.sort(lat_b, axis=1)

    # longitude in [-180, 180), ascending; bounds move with their centre
    lon = np.asarray(raw[desc.lon].values, dtype="float64")
    new_lon = ((lon + 180.0) % 360.0) - 180.0
    lon_b = np.sort(lon_b, axis=1) + (new_lon - lon)[:, None]
    order = np.argsort(new_lon, kind="stable")
    out = out.isel(lon=order)
    new_lon, lon_b = new_lon[order], lon_b[order]

    out = out.assign_coords(
        lat=("lat", lat, {"standard_name": "latitude", "units": "degrees_north", "axis": "Y", "bounds": "lat_bnds"}),
        lon=("lon", new_lon, {"standard_name": "longitude", "units": "degrees_east", "axis": "X", "bounds": "lon_bnds"}),
    )
    out = out.assign_coords(lat_bnds=(("lat", "nv"), lat_b), lon_bnds=(("lon", "nv"), lon_b))
    exact = cell_area(lat_b, lon_b, lat=lat, lon=new_lon)
    if "cell_area" in out.coords:
        given = out["cell_area"].transpose("lat", "lon")
        exact = exact.copy(data=np.asarray(given.values, dtype="float64"))
    return out.assign_coords(cell_area=exact)
