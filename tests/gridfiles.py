"""Small NetCDF files on rotated-pole, curvilinear and unstructured grids, for the grid tests.

True positions are computed here with pyproj (rotated pole) or written out by hand, never
with ``evaluation.grids``, so that the package is checked against them.  Fields are
functions ``f(lat, lon, year, month)`` of the true position, as in :mod:`cfdata`.
"""

from __future__ import annotations

from collections.abc import Callable
from pathlib import Path

import cftime
import numpy as np
import xarray as xr
from cfdata import default_field

__all__ = ["true_positions", "monthly_times", "write_rotated", "write_curvilinear", "write_mesh", "fibonacci_sphere"]

Field = Callable[[np.ndarray, np.ndarray, np.ndarray, np.ndarray], np.ndarray]


def true_positions(rlon: np.ndarray, rlat: np.ndarray, pole_lat: float, pole_lon: float, north_pole_grid_lon: float = 0.0) -> tuple[np.ndarray, np.ndarray]:
    """True longitude/latitude of rotated positions through pyproj (CRS.from_cf), the outside reference."""
    from pyproj import CRS, Transformer

    crs = CRS.from_cf(
        {
            "grid_mapping_name": "rotated_latitude_longitude",
            "grid_north_pole_latitude": pole_lat,
            "grid_north_pole_longitude": pole_lon,
            "north_pole_grid_longitude": north_pole_grid_lon,
        }
    )
    lon, lat = Transformer.from_crs(crs, CRS.from_epsg(4326), always_xy=True).transform(rlon, rlat)
    return ((np.asarray(lon) + 180.0) % 360.0) - 180.0, np.asarray(lat)


def monthly_times(start_year: int, years: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(numeric times in days since 1850-01-01, year, month) of mid-month steps, standard calendar."""
    dates = [cftime.datetime(y, m, 15, calendar="standard") for y in range(start_year, start_year + years) for m in range(1, 13)]
    t = cftime.date2num(dates, "days since 1850-01-01", calendar="standard")
    return np.asarray(t, dtype="float64"), np.array([d.year for d in dates], float), np.array([d.month for d in dates], float)


def _time_coord(start_year: int, years: int) -> tuple[dict, np.ndarray, np.ndarray]:
    t, year, month = monthly_times(start_year, years)
    coords = {"time": ("time", t, {"standard_name": "time", "units": "days since 1850-01-01", "calendar": "standard", "axis": "T"})}
    return coords, year, month


def _values(field: Field | None, lat: np.ndarray, lon: np.ndarray, year: np.ndarray, month: np.ndarray) -> np.ndarray:
    f = field or default_field
    shape = (-1,) + (1,) * lat.ndim
    return np.asarray(f(lat[None], lon[None], year.reshape(shape), month.reshape(shape)), dtype="float64")


def write_rotated(
    path: Path,
    *,
    rlat: np.ndarray,
    rlon: np.ndarray,
    pole_lat: float,
    pole_lon: float,
    north_pole_grid_lon: float = 0.0,
    field: Field | None = None,
    start_year: int = 1990,
    years: int = 2,
    variable: str = "tas",
    units: str = "K",
    standard_name: str = "air_temperature",
    bounds: bool = True,
    aux_latlon: bool = True,
    mapping: bool = True,
) -> Path:
    """A field on a rotated-pole grid (CF rotated_latitude_longitude), like a regional model writes."""
    coords, year, month = _time_coord(start_year, years)
    rl, rp = np.meshgrid(rlon, rlat)
    lon, lat = true_positions(rl, rp, pole_lat, pole_lon, north_pole_grid_lon)
    data = _values(field, lat, lon, year, month)
    ds = xr.Dataset(coords=coords)
    ds["rlat"] = ("rlat", rlat, {"standard_name": "grid_latitude", "units": "degrees", "axis": "Y", **({"bounds": "rlat_bnds"} if bounds else {})})
    ds["rlon"] = ("rlon", rlon, {"standard_name": "grid_longitude", "units": "degrees", "axis": "X", **({"bounds": "rlon_bnds"} if bounds else {})})
    if bounds:
        for name, c in (("rlat", rlat), ("rlon", rlon)):
            mid = 0.5 * (c[1:] + c[:-1])
            edges = np.concatenate([[c[0] - (mid[0] - c[0])], mid, [c[-1] + (c[-1] - mid[-1])]])
            ds[f"{name}_bnds"] = ((name, "bnds"), np.stack([edges[:-1], edges[1:]], axis=1))
    attrs = {"standard_name": standard_name, "units": units}
    if mapping:
        ds["rotated_pole"] = ((), np.int32(0), {
            "grid_mapping_name": "rotated_latitude_longitude",
            "grid_north_pole_latitude": pole_lat,
            "grid_north_pole_longitude": pole_lon,
            "north_pole_grid_longitude": north_pole_grid_lon,
        })
        attrs["grid_mapping"] = "rotated_pole"
    if aux_latlon:
        ds["lat"] = (("rlat", "rlon"), lat, {"standard_name": "latitude", "units": "degrees_north"})
        ds["lon"] = (("rlat", "rlon"), lon, {"standard_name": "longitude", "units": "degrees_east"})
        attrs["coordinates"] = "lat lon"
    ds[variable] = (("time", "rlat", "rlon"), data.astype("float32"), attrs)
    ds.attrs["Conventions"] = "CF-1.10"
    ds.to_netcdf(path)
    return path


def write_curvilinear(
    path: Path,
    *,
    lat: np.ndarray,
    lon: np.ndarray,
    lat_vertices: np.ndarray | None = None,
    lon_vertices: np.ndarray | None = None,
    values: np.ndarray | None = None,
    field: Field | None = None,
    dims: tuple[str, str] = ("j", "i"),
    start_year: int = 1990,
    years: int = 2,
    variable: str = "tas",
    units: str = "K",
    standard_name: str = "air_temperature",
    area: np.ndarray | None = None,
) -> Path:
    """A field on 2-D latitude/longitude (``coordinates`` attribute, optional CF vertex bounds)."""
    coords, year, month = _time_coord(start_year, years)
    data = _values(field, lat, lon, year, month) if values is None else np.broadcast_to(values, (year.size, *lat.shape)).copy()
    ds = xr.Dataset(coords=coords)
    ds["nav_lat"] = (dims, lat, {"standard_name": "latitude", "units": "degrees_north"})
    ds["nav_lon"] = (dims, lon, {"standard_name": "longitude", "units": "degrees_east"})
    attrs = {"standard_name": standard_name, "units": units, "coordinates": "nav_lat nav_lon"}
    if lat_vertices is not None and lon_vertices is not None:
        ds["nav_lat"].attrs["bounds"] = "vertices_lat"
        ds["nav_lon"].attrs["bounds"] = "vertices_lon"
        ds["vertices_lat"] = ((*dims, "nvertex"), lat_vertices)
        ds["vertices_lon"] = ((*dims, "nvertex"), lon_vertices)
    if area is not None:
        ds["areacello"] = (dims, area, {"standard_name": "cell_area", "units": "m2"})
        attrs["cell_measures"] = "area: areacello"
    ds[variable] = (("time", *dims), data.astype("float32") if data.dtype == np.float64 else data, attrs)
    ds.attrs["Conventions"] = "CF-1.10"
    ds.to_netcdf(path)
    return path


def write_mesh(
    path: Path,
    *,
    lat: np.ndarray,
    lon: np.ndarray,
    field: Field | None = None,
    names: tuple[str, str] = ("latCell", "lonCell"),
    angle_units: str | None = "radians",
    start_year: int = 1990,
    years: int = 2,
    variable: str = "tas",
    units: str = "K",
    standard_name: str = "air_temperature",
    area: np.ndarray | None = None,
    dtype: str = "float64",
    standard_names: bool = False,
) -> Path:
    """A field on an unstructured mesh: dimension nCells, 1-D centres (degrees in, stored as ``angle_units``)."""
    coords, year, month = _time_coord(start_year, years)
    data = _values(field, lat, lon, year, month)
    ds = xr.Dataset(coords=coords)
    scale = np.deg2rad(1.0) if angle_units in ("radians", None) else 1.0
    lat_units = {"radians": "radians", None: None}.get(angle_units, "degrees_north")
    lon_units = {"radians": "radians", None: None}.get(angle_units, "degrees_east")
    ds[names[0]] = ("nCells", lat * scale, {} if lat_units is None else {"units": lat_units})
    ds[names[1]] = ("nCells", lon * scale, {} if lon_units is None else {"units": lon_units})
    if standard_names:
        ds[names[0]].attrs["standard_name"] = "latitude"
        ds[names[1]].attrs["standard_name"] = "longitude"
    attrs = {"standard_name": standard_name, "units": units}
    if area is not None:
        ds["areaCell"] = ("nCells", area, {"units": "m2"})
        attrs["cell_measures"] = "area: areaCell"
    ds[variable] = (("time", "nCells"), data.astype(dtype), attrs)
    ds.attrs["Conventions"] = "CF-1.10"
    ds.to_netcdf(path)
    return path


def fibonacci_sphere(n: int) -> tuple[np.ndarray, np.ndarray]:
    """``n`` nearly uniform points on the sphere (golden-angle spiral; common practice): lon, lat in degrees."""
    k = np.arange(n) + 0.5
    lat = np.rad2deg(np.arcsin(1.0 - 2.0 * k / n))
    lon = ((np.rad2deg(np.pi * (1.0 + 5.0**0.5) * k) + 180.0) % 360.0) - 180.0
    return lon, lat
