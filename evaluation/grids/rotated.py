"""Rotated-pole grids: a regular grid in rotated coordinates (CF ``rotated_latitude_longitude``).

Found through a grid-mapping variable with ``grid_mapping_name = rotated_latitude_longitude``
and the 1-D rotated axes (``standard_name`` grid_latitude/grid_longitude, else ``axis``
Y/X).  Canonical form: dimensions ``y`` (rotated latitude) and ``x`` (rotated longitude),
kept as 1-D coordinates with their bounds ``y_bnds``/``x_bnds``; true ``lat(y, x)`` and
``lon(y, x)`` in degrees; true corners ``lat_bnds``/``lon_bnds (y, x, 4)``; ``cell_area
(y, x)`` in m²; the pole in the scalar coordinate ``crs`` (CF grid-mapping attributes).

The rotation is written out from the CF definition (cf-conventions appendix F) as a 3-D
rotation matrix rather than through pyproj: it is three lines, exact, vectorised, and it
runs on corner and edge points in one call; tests check it against pyproj's
``CRS.from_cf`` transformer.  Cell areas are exact: a rotation preserves area, and a cell
bounded by rotated meridians and parallels has ``R² |Δ sin φ'| |Δ λ'|``.
"""

from __future__ import annotations

import numpy as np
import xarray as xr

from ..errors import InputError
from .description import GridDescription, attr
from .regular import infer_bounds
from .spherical import EARTH_RADIUS, to_lonlat, to_xyz

__all__ = ["MAPPING_NAME", "find", "rotation_matrix", "rotated_to_true", "true_to_rotated", "canonical"]

MAPPING_NAME = "rotated_latitude_longitude"
_AXES = {"y": ("grid_latitude", "Y"), "x": ("grid_longitude", "X")}


def _mapping_variable(ds: xr.Dataset) -> str | None:
    for name, var in ds.variables.items():
        if attr(var, "grid_mapping_name") == MAPPING_NAME:
            return str(name)
    return None


def _rotated_axis(ds: xr.Dataset, which: str) -> str | None:
    standard_name, axis = _AXES[which]
    dims = [n for n, var in ds.variables.items() if var.ndim == 1 and var.dims[0] == n]  # not ds[n]: see io.find_axis
    for key, wanted in (("standard_name", standard_name), ("axis", axis)):
        for name in dims:
            value = attr(ds.variables[name], key)
            if value is not None and value.upper() == wanted.upper():
                return str(name)
    return None


def find(ds: xr.Dataset) -> GridDescription | None:
    """A rotated-pole grid, or None.  Raises when the mapping is there but incomplete."""
    mapping = _mapping_variable(ds)
    if mapping is None:
        ylat = _rotated_axis(ds, "y")
        if ylat is not None and attr(ds[ylat], "standard_name") == "grid_latitude":
            raise InputError(
                f"'{ylat}' is a rotated latitude (standard_name grid_latitude) but no grid mapping gives the pole",
                file=ds.encoding.get("source"),
                remedy="add a variable with grid_mapping_name = 'rotated_latitude_longitude' and the pole, and name it in the data's grid_mapping attribute",
            )
        return None
    rlat, rlon = _rotated_axis(ds, "y"), _rotated_axis(ds, "x")
    var = ds.variables[mapping]
    missing = [k for k in ("grid_north_pole_latitude", "grid_north_pole_longitude") if attr(var, k) is None]
    if rlat is None or rlon is None or missing:
        what = f"the attribute {missing[0]}" if missing else "1-D rotated latitude/longitude axes (standard_name grid_latitude/grid_longitude or axis Y/X)"
        raise InputError(
            f"rotated-pole grid mapping '{mapping}' without {what}",
            file=ds.encoding.get("source"),
            remedy="give the grid mapping its pole (grid_north_pole_latitude/_longitude) and the rotated axes their CF attributes",
        )
    keys = ("grid_north_pole_latitude", "grid_north_pole_longitude", "north_pole_grid_longitude")
    params = tuple((k, str(float(attr(var, k) or 0.0))) for k in keys)
    return GridDescription(
        kind="rotated",
        dims=(rlat, rlon),
        shape=(int(ds.sizes[rlat]), int(ds.sizes[rlon])),
        lat=rlat,
        lon=rlon,
        how=f"rotated pole (grid mapping '{mapping}', pole at {float(params[0][1]):g}°N {float(params[1][1]):g}°E), axes '{rlat}'/'{rlon}'",
        mapping=(("grid_mapping_name", MAPPING_NAME), *params),
    )


def rotation_matrix(pole_lat: float, pole_lon: float, north_pole_grid_lon: float = 0.0) -> np.ndarray:
    """Matrix turning rotated unit vectors into true ones.

    Its columns are the true directions of the rotated x, y and z axes: z is the rotated
    north pole (``pole_lat``, ``pole_lon``); x (rotated 0°N 0°E) lies on the meridian
    opposite the pole, at latitude 90° − ``pole_lat``; y = z × x.  A rotated longitude
    offset ``north_pole_grid_lon`` (the rotated longitude of the true pole, CF
    ``north_pole_grid_longitude``) turns about the rotated z axis first.
    """
    p, lam = np.deg2rad(pole_lat), np.deg2rad(pole_lon)
    z = np.array([np.cos(p) * np.cos(lam), np.cos(p) * np.sin(lam), np.sin(p)])
    x = np.array([-np.sin(p) * np.cos(lam), -np.sin(p) * np.sin(lam), np.cos(p)])
    y = np.cross(z, x)
    g = np.deg2rad(north_pole_grid_lon)
    turn = np.array([[np.cos(g), np.sin(g), 0.0], [-np.sin(g), np.cos(g), 0.0], [0.0, 0.0, 1.0]])
    return np.stack([x, y, z], axis=1) @ turn


def _matrix(mapping: dict[str, str] | tuple) -> np.ndarray:
    m = dict(mapping)
    return rotation_matrix(
        float(m["grid_north_pole_latitude"]), float(m["grid_north_pole_longitude"]), float(m.get("north_pole_grid_longitude", 0.0))
    )


def rotated_to_true(rlon: np.ndarray, rlat: np.ndarray, mapping: dict | tuple) -> tuple[np.ndarray, np.ndarray]:
    """True (longitude in [-180, 180), latitude) in degrees of rotated positions."""
    return to_lonlat(to_xyz(rlon, rlat) @ _matrix(mapping).T)


def true_to_rotated(lon: np.ndarray, lat: np.ndarray, mapping: dict | tuple) -> tuple[np.ndarray, np.ndarray]:
    """Rotated (longitude in [-180, 180), latitude) in degrees of true positions."""
    return to_lonlat(to_xyz(lon, lat) @ _matrix(mapping))


def _axis_bounds(raw: xr.Dataset, name: str, kind: str) -> np.ndarray:
    bname = attr(raw[name], "bounds")
    if bname and bname in raw.variables and raw[bname].shape == (raw.sizes[name], 2):
        return np.sort(np.asarray(raw[bname].values, dtype="float64"), axis=1)
    return np.sort(infer_bounds(np.asarray(raw[name].values, dtype="float64"), kind=kind), axis=1)  # type: ignore[arg-type]


#: Largest difference (degrees) tolerated between the rotation and the file's own 2-D
#: latitude/longitude: files store them in single precision (about 1e-5°).
AGREEMENT = 0.01


def _check_against_file(raw: xr.Dataset, desc: GridDescription, lon: np.ndarray, lat: np.ndarray) -> None:
    """Refuse a file whose own 2-D latitude/longitude contradict its grid mapping.

    Many files carry both; a pole written wrongly (or for another grid) would otherwise
    place the domain somewhere else without a word.
    """
    from .curvilinear import is_latitude, is_longitude

    def two_d(test) -> np.ndarray | None:
        for var in raw.variables.values():
            if var.ndim == 2 and set(var.dims) == set(desc.dims) and test(var):
                return np.asarray(var.transpose(*desc.dims).values, dtype="float64")
        return None

    file_lat, file_lon = two_d(is_latitude), two_d(is_longitude)
    if file_lat is None or file_lon is None:
        return
    d_lat = np.nanmax(np.abs(file_lat - lat))
    d_lon = np.nanmax(np.abs(((file_lon - lon + 180.0) % 360.0) - 180.0) * np.cos(np.deg2rad(lat)))
    if max(d_lat, d_lon) > AGREEMENT:
        raise InputError(
            f"the rotated pole of the grid mapping places the cells up to {max(d_lat, d_lon):.3g}° away from the file's own latitude/longitude",
            file=raw.encoding.get("source"),
            remedy="correct grid_north_pole_latitude/_longitude (and north_pole_grid_longitude) of the grid mapping, or the 2-D latitude/longitude",
        )


def canonical(out: xr.Dataset, raw: xr.Dataset, desc: GridDescription) -> xr.Dataset:
    """True centres, corners and exact areas for ``out`` (already on dims ``y``/``x``)."""
    rlat = np.asarray(raw[desc.lat].values, dtype="float64")
    rlon = np.asarray(raw[desc.lon].values, dtype="float64")
    if np.any(np.abs(rlat) > 90.0) or not (np.all(np.isfinite(rlat)) and np.all(np.isfinite(rlon))):
        raise InputError(
            f"rotated latitude '{desc.lat}' has values beyond ±90° or missing values",
            file=raw.encoding.get("source"),
            remedy="check the rotated coordinates",
        )
    if np.unique(rlat).size < rlat.size or np.unique(rlon).size < rlon.size:
        raise InputError(f"the rotated axes '{desc.lat}'/'{desc.lon}' repeat a value", file=raw.encoding.get("source"), remedy="drop the repeated row or column")
    yb, xb = _axis_bounds(raw, desc.lat, "lat"), _axis_bounds(raw, desc.lon, "lon")
    rlon2, rlat2 = np.meshgrid(rlon, rlat)
    lon, lat = rotated_to_true(rlon2, rlat2, desc.mapping)
    _check_against_file(raw, desc, lon, lat)
    # corners counter-clockwise in (rotated lon, rotated lat): CF vertex order
    c_rlat = np.stack([yb[:, 0], yb[:, 0], yb[:, 1], yb[:, 1]], axis=-1)[:, None, :].repeat(rlon.size, axis=1)
    c_rlon = np.stack([xb[:, 0], xb[:, 1], xb[:, 1], xb[:, 0]], axis=-1)[None, :, :].repeat(rlat.size, axis=0)
    lon_v, lat_v = rotated_to_true(c_rlon, c_rlat, desc.mapping)
    dmu = np.abs(np.sin(np.deg2rad(yb[:, 1])) - np.sin(np.deg2rad(yb[:, 0])))
    dlam = np.deg2rad(np.abs(xb[:, 1] - xb[:, 0]))
    area = EARTH_RADIUS**2 * dmu[:, None] * dlam[None, :]
    if "cell_area" in out.coords:
        area = np.asarray(out["cell_area"].transpose("y", "x").values, dtype="float64")
    crs = xr.DataArray(0, attrs=dict(desc.mapping))
    return out.assign_coords(
        y=("y", rlat, {"standard_name": "grid_latitude", "units": "degrees", "axis": "Y", "bounds": "y_bnds"}),
        x=("x", rlon, {"standard_name": "grid_longitude", "units": "degrees", "axis": "X", "bounds": "x_bnds"}),
        y_bnds=(("y", "nv"), yb),
        x_bnds=(("x", "nv"), xb),
        lat=(("y", "x"), lat, {"standard_name": "latitude", "units": "degrees_north", "bounds": "lat_bnds"}),
        lon=(("y", "x"), lon, {"standard_name": "longitude", "units": "degrees_east", "bounds": "lon_bnds"}),
        lat_bnds=(("y", "x", "nv4"), lat_v),
        lon_bnds=(("y", "x", "nv4"), lon_v),
        cell_area=(("y", "x"), area, {"units": "m2", "standard_name": "cell_area"}),
        crs=crs,
    )
