"""Small NetCDF files with the time axes modelling centres write (for the time tests).

Each file holds one variable ``tas (time, lat, lon)`` on a small regular grid with CF
latitude/longitude attributes; the time coordinate is written exactly as given (raw
numbers and attributes, no encoding by xarray), optionally with a bounds variable.
"""

from __future__ import annotations

import datetime
from collections.abc import Mapping
from pathlib import Path

import cftime
import numpy as np
import xarray as xr

__all__ = ["GRID", "write_raw", "daily_dates", "month_value"]

GRID = {
    "lat": np.array([-45.0, 15.0, 60.0]),
    "lon": np.array([-120.0, 0.0, 90.0, 150.0]),
    "lat_bnds": np.array([[-90.0, -10.0], [-10.0, 30.0], [30.0, 90.0]]),
    "lon_bnds": np.array([[-180.0, -60.0], [-60.0, 45.0], [45.0, 120.0], [120.0, 180.0]]),
}


def month_value(year: int, month: int) -> np.ndarray:
    """A field that identifies its month and differs between cells (K)."""
    lat = GRID["lat"][:, None]
    lon = GRID["lon"][None, :]
    return 280.0 + 0.1 * (year - 2000) + 3.0 * np.cos(np.deg2rad(lat)) * np.cos(2 * np.pi * (month - 1) / 12) + 0.01 * lon + 0.5 * month


def write_raw(
    path: str | Path,
    time_values: np.ndarray,
    time_attrs: Mapping[str, object],
    data: np.ndarray,
    *,
    bounds: np.ndarray | None = None,
    bounds_attr: str = "bounds",
    time_dim: str = "time",
    global_attrs: Mapping[str, str] | None = None,
) -> Path:
    """Write ``data (time, lat, lon)`` with a raw time coordinate and optional bounds."""
    coords = {
        time_dim: (time_dim, np.asarray(time_values), dict(time_attrs)),
        "lat": ("lat", GRID["lat"], {"standard_name": "latitude", "units": "degrees_north", "bounds": "lat_bnds"}),
        "lon": ("lon", GRID["lon"], {"standard_name": "longitude", "units": "degrees_east", "bounds": "lon_bnds"}),
    }
    data_vars = {
        "tas": ((time_dim, "lat", "lon"), np.asarray(data, dtype="float64"), {"units": "K", "standard_name": "air_temperature"}),
        "lat_bnds": (("lat", "nv"), GRID["lat_bnds"]),
        "lon_bnds": (("lon", "nv"), GRID["lon_bnds"]),
    }
    if bounds is not None:
        data_vars["time_bnds"] = ((time_dim, "nv"), np.asarray(bounds, dtype="float64"))
        coords[time_dim][2][bounds_attr] = "time_bnds"
    ds = xr.Dataset(data_vars, coords=coords, attrs={"Conventions": "CF-1.10", **(global_attrs or {})})
    encoding = {n: {"_FillValue": None} for n in (time_dim, "lat", "lon", "lat_bnds", "lon_bnds", *(["time_bnds"] if bounds is not None else []))}
    ds.to_netcdf(path, encoding=encoding, format="NETCDF4")
    return Path(path)


def daily_dates(first: tuple[int, int, int], stop: tuple[int, int, int], calendar: str, *, per_day: int = 1) -> list[cftime.datetime]:
    """Steps of ``24/per_day`` hours from 00:00 of ``first`` to before 00:00 of ``stop`` (cftime arithmetic)."""
    step = datetime.timedelta(hours=24 // per_day)
    t = cftime.datetime(*first, calendar=calendar)
    end = cftime.datetime(*stop, calendar=calendar)
    out = []
    while t < end:
        out.append(t)
        t = t + step
    return out
