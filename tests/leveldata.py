"""Small CF files with a vertical axis, for the tests of vertical levels.

:func:`write_levels` writes a monthly field ``(time, level, lat, lon)`` on any vertical
axis the test describes by its attributes (standard_name, axis, positive, units), with the
data given as a function of the level's value in the file's units, so that a test knows
every number independently of gridscore.  Missing values (below the surface) are written
as the file's ``_FillValue`` (and optionally a different ``missing_value``), the way
models write them.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping, Sequence
from pathlib import Path

import cftime
import numpy as np
import xarray as xr

__all__ = ["PRESSURE", "write_levels"]

#: Attributes of a CF pressure-level axis (cf-conventions 4.3.1).
PRESSURE = {"standard_name": "air_pressure", "units": "hPa", "positive": "down", "axis": "Z"}

LevelFunc = Callable[[np.ndarray, np.ndarray, np.ndarray, np.ndarray], np.ndarray]


def _default(level: np.ndarray, lat: np.ndarray, lon: np.ndarray, month: np.ndarray) -> np.ndarray:
    return 200.0 + 0.0 * lat + 0.0 * lon + 0.0 * month + 0.0 * level


def write_levels(
    path: str | Path,
    *,
    levels: Sequence[float] = (1000.0, 850.0, 500.0, 200.0),
    axis_attrs: Mapping[str, str] = PRESSURE,
    axis_name: str = "plev",
    field: LevelFunc = _default,
    variable: str = "ta",
    units: str = "K",
    standard_name: str | None = "air_temperature",
    dlat: float = 15.0,
    dlon: float = 30.0,
    start_year: int = 1995,
    years: int = 3,
    missing: Callable[[np.ndarray, np.ndarray, np.ndarray], np.ndarray] | None = None,
    fill_value: float = 1.0e20,
    missing_value: float | None = None,
) -> Path:
    """Write ``variable (time, <axis_name>, lat, lon)`` to ``path`` (NetCDF4).

    ``field(level, lat, lon, month)`` gives the values (broadcast arrays); ``missing(level,
    lat, lon)`` marks cells stored as missing.  With ``missing_value`` given, the marked
    cells of the even latitude rows hold it instead of ``_FillValue`` (both are CF ways of
    writing a missing value).
    """
    lat = np.arange(-90.0 + dlat / 2, 90.0, dlat)
    lon = np.arange(0.0, 360.0, dlon)
    lev = np.asarray(levels, dtype="float64")
    dates = [cftime.datetime(start_year + m // 12, m % 12 + 1, 15, calendar="standard") for m in range(12 * years)]
    month = np.array([d.month for d in dates], dtype="float64")
    L, Y, X = np.meshgrid(lev, lat, lon, indexing="ij")
    data = np.stack([field(L, Y, X, np.full_like(L, m)) for m in month]).astype("float64")
    if missing is not None:
        hole = np.broadcast_to(missing(L, Y, X), L.shape)
        stored = np.where(hole, fill_value, data)
        if missing_value is not None:
            rows = np.zeros_like(hole)
            rows[:, ::2, :] = True
            stored = np.where(hole & rows, missing_value, stored)
        data = np.broadcast_to(stored, data.shape).copy() if stored.ndim == 4 else np.where(hole[None], stored[None], data)
    attrs = {"units": units, "_FillValue": fill_value}
    if standard_name:
        attrs["standard_name"] = standard_name
    if missing_value is not None:
        attrs["missing_value"] = missing_value
    ds = xr.Dataset(
        {variable: (("time", axis_name, "lat", "lon"), data, attrs)},
        coords={
            "time": ("time", cftime.date2num(dates, "days since 1850-01-01", calendar="standard"), {"units": "days since 1850-01-01", "calendar": "standard", "standard_name": "time"}),
            axis_name: (axis_name, lev, dict(axis_attrs)),
            "lat": ("lat", lat, {"units": "degrees_north", "standard_name": "latitude"}),
            "lon": ("lon", lon, {"units": "degrees_east", "standard_name": "longitude"}),
        },
        attrs={"Conventions": "CF-1.10"},
    )
    encoding = {name: {"_FillValue": None} for name in ds.coords}
    encoding[variable] = {"_FillValue": fill_value}
    ds[variable].attrs.pop("_FillValue")
    ds.to_netcdf(path, encoding=encoding, format="NETCDF4")
    return Path(path)
