"""Helpers for the tests: small CF-NetCDF datasets and hand computations.

:func:`cf_dataset` builds an in-memory dataset in the layout a file on disk would have
(numeric time with CF ``units``/``calendar``, optional bounds, cell areas, land fraction),
and :func:`write_cf` writes it.  Fields are given as functions of the *physical* location
(latitude, longitude wrapped into [-180, 180)) and of the calendar year and month, so the
same function written on a descending or 0…360 grid describes the same numbers.

The fixture ``cf_file`` (tests/conftest.py) is a factory writing into ``tmp_path``::

    def test_x(cf_file):
        path = cf_file("ref.nc", dlat=2.0, calendar="noleap", years=3)
"""

from __future__ import annotations

import itertools
from collections.abc import Callable, Mapping, Sequence
from contextlib import contextmanager
from pathlib import Path

import cftime
import numpy as np
import xarray as xr

__all__ = [
    "EARTH_RADIUS_M",
    "cf_dataset",
    "write_cf",
    "centres",
    "default_field",
    "exact_area",
    "days_in_month",
    "naive_pattern_stats",
    "read_monthly",
    "hand_season_means",
]

# IUGG mean Earth radius (value from memory: 6 371.0 km), used for hand computations of
# cell areas independent of evaluation.grid.
EARTH_RADIUS_M = 6_371_000.0

FieldFunc = Callable[[np.ndarray, np.ndarray, np.ndarray, np.ndarray], np.ndarray]
MaskFunc = Callable[[np.ndarray, np.ndarray], np.ndarray]


def default_field(lat: np.ndarray, lon: np.ndarray, year: np.ndarray, month: np.ndarray) -> np.ndarray:
    """A smooth temperature-like field (K): meridional gradient, zonal waves, seasons, trend."""
    phi, lam = np.deg2rad(lat), np.deg2rad(lon)
    season = np.cos(2 * np.pi * (month - 1) / 12.0)
    return (
        250.0
        + 35.0 * np.cos(phi) ** 2
        + 3.0 * np.sin(2 * lam) * np.cos(phi)
        + 1.5 * np.cos(lam + 0.3)
        - 12.0 * np.sin(phi) * season
        + 0.03 * (year - 2000) * (1.0 + np.sin(phi))
    )


def days_in_month(year: int, month: int, cal: str) -> int:
    """Month lengths written out from the CF conventions (section 4.4.1), not from cftime."""
    cal = {"365_day": "noleap", "366_day": "all_leap", "gregorian": "standard"}.get(cal, cal)
    if cal == "360_day":
        return 30
    leap_feb = {"noleap": False, "all_leap": True, "julian": year % 4 == 0}.get(
        cal, (year % 4 == 0 and year % 100 != 0) or year % 400 == 0  # Gregorian rule after 1582
    )
    return (31, 29 if leap_feb else 28, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31)[month - 1]


def naive_pattern_stats(m: np.ndarray, r: np.ndarray, w: np.ndarray) -> dict[str, float]:
    """Area-weighted population statistics written out directly (common practice; Taylor 2001).

    Cells missing in either field or with zero weight are left out of both.
    """
    ok = np.isfinite(m) & np.isfinite(r) & (w > 0)
    m, r, w = m[ok], r[ok], w[ok] / w[ok].sum()
    mm, mr = np.sum(w * m), np.sum(w * r)
    sm, sr = np.sqrt(np.sum(w * (m - mm) ** 2)), np.sqrt(np.sum(w * (r - mr) ** 2))
    corr = np.sum(w * (m - mm) * (r - mr)) / (sm * sr)
    ratio = sm / sr
    return {
        "mean": mm,
        "ref_mean": mr,
        "bias": mm - mr,
        "rmse": np.sqrt(np.sum(w * (m - r) ** 2)),
        "crmse": np.sqrt(np.sum(w * ((m - mm) - (r - mr)) ** 2)),
        "corr": corr,
        "std_ratio": ratio,
        # Taylor (2001) eq. 4 with R0 = 1
        "taylor_skill": 4 * (1 + corr) / ((ratio + 1 / ratio) ** 2 * 2),
    }


def read_monthly(path: str | Path, variable: str) -> tuple[np.ndarray, list[tuple[int, int]], str, xr.Dataset]:
    """A file's raw values (float64, file orientation), its (year, month) steps and calendar.

    Times are decoded with cftime directly, not through the package.
    """
    with xr.open_dataset(path, decode_times=False) as ds:
        ds = ds.load()
    time_name = next(n for n in ds.coords if "since" in str(ds[n].attrs.get("units", "")))
    t = ds[time_name]
    cal = t.attrs.get("calendar", "standard")
    dates = cftime.num2date(t.values, t.attrs["units"], calendar=cal)
    return ds[variable].values.astype("float64"), [(d.year, d.month) for d in dates], cal, ds


SEASON_MONTHS = {
    "ANN": tuple(range(1, 13)), "DJF": (12, 1, 2), "MAM": (3, 4, 5), "JJA": (6, 7, 8), "SON": (9, 10, 11),
    **{m: (i + 1,) for i, m in enumerate(("JAN", "FEB", "MAR", "APR", "MAY", "JUN", "JUL", "AUG", "SEP", "OCT", "NOV", "DEC"))},
}  # fmt: skip


def hand_season_means(values: np.ndarray, steps: Sequence[tuple[int, int]], cal: str, season: str, first: int, last: int) -> dict[int, np.ndarray]:
    """Month-length-weighted season means for label years ``first..last`` (complete seasons only).

    DJF of year Y is December Y-1, January and February Y (WMO practice, common practice).
    """
    index = {ym: i for i, ym in enumerate(steps)}
    out = {}
    for y in range(first, last + 1):
        months = SEASON_MONTHS[season]
        wanted = [(y - 1 if (m == 12 and season == "DJF") else y, m) for m in months]
        if not all(ym in index for ym in wanted):
            continue
        w = np.array([days_in_month(yy, mm, cal) for yy, mm in wanted], dtype=float)
        stack = np.stack([values[index[ym]] for ym in wanted])
        out[y] = np.tensordot(w, stack, axes=1) / w.sum()
    return out


def centres(step: float, *, start: float, stop: float) -> np.ndarray:
    """Cell centres of a regular axis from ``start`` to ``stop`` (edges) with ``step``."""
    n = int(round((stop - start) / step))
    return start + step * (np.arange(n) + 0.5)


def exact_area(lat_bnds: np.ndarray, lon_bnds: np.ndarray, radius: float = EARTH_RADIUS_M) -> np.ndarray:
    """Area of latitude-longitude cells on a sphere, R² Δ(sin φ) Δλ (textbook formula)."""
    lat_b = np.deg2rad(np.asarray(lat_bnds, dtype=float))
    lon_b = np.deg2rad(np.asarray(lon_bnds, dtype=float))
    dmu = np.abs(np.sin(lat_b[:, 1]) - np.sin(lat_b[:, 0]))
    dlam = np.abs(lon_b[:, 1] - lon_b[:, 0])
    return radius**2 * dmu[:, None] * dlam[None, :]


def _edges_bounds(c: np.ndarray, *, clip: bool) -> np.ndarray:
    mid = 0.5 * (c[:-1] + c[1:])
    edges = np.concatenate([[c[0] - (mid[0] - c[0])], mid, [c[-1] + (c[-1] - mid[-1])]])
    if clip:
        edges = np.clip(edges, -90.0, 90.0)
    return np.stack([edges[:-1], edges[1:]], axis=1)


_COORD_ATTRS = {
    "lat": {"standard_name": "latitude", "axis": "Y", "units": "degrees_north", "long_name": "latitude"},
    "lon": {"standard_name": "longitude", "axis": "X", "units": "degrees_east", "long_name": "longitude"},
    "time": {"standard_name": "time", "axis": "T", "long_name": "time"},
}


def _coord_attrs(axis: str, identify_by: str | Sequence[str]) -> dict[str, str]:
    keys = ("standard_name", "axis", "units", "long_name") if identify_by == "all" else (
        () if identify_by == "none" else ((identify_by,) if isinstance(identify_by, str) else tuple(identify_by))
    )
    return {k: v for k, v in _COORD_ATTRS[axis].items() if k in keys}


def cf_dataset(
    *,
    variable: str = "tas",
    units: str | None = "K",
    standard_name: str | None = "air_temperature",
    field: FieldFunc | None = None,
    offset: float = 0.0,
    scale: float = 1.0,
    dlat: float = 2.0,
    dlon: float | None = None,
    lat: np.ndarray | None = None,
    lon: np.ndarray | None = None,
    lat_bounds: np.ndarray | None = None,
    lon_bounds: np.ndarray | None = None,
    lat_descending: bool = False,
    lon_0_360: bool = False,
    names: Mapping[str, str] | None = None,
    identify_by: str | Sequence[str] = "all",
    bounds: bool = True,
    bounds_names: Mapping[str, str] | None = None,
    calendar: str | None = "standard",
    start_year: int = 1990,
    years: int = 3,
    months: Sequence[tuple[int, int]] | None = None,
    day: int = 15,
    time_units: str = "days since 1850-01-01",
    with_time: bool = True,
    nan_mask: MaskFunc | np.ndarray | None = None,
    land_fraction: Callable[[np.ndarray, np.ndarray], np.ndarray] | None = None,
    land_units: str = "%",
    cell_area: str | np.ndarray | None = None,
    dtype: str = "float32",
    global_attrs: Mapping[str, str] | None = None,
    extra_variables: Mapping[str, Mapping] | None = None,
) -> xr.Dataset:
    """A small CF dataset as it would be stored on disk (times not decoded).

    Parameters
    ----------
    variable, units, standard_name
        The data variable; ``units=None``/``standard_name=None`` leaves the attribute out.
    field
        ``f(lat, lon, year, month)`` in physical degrees (longitude wrapped into
        [-180, 180)); broadcast shapes ``(1, nlat, nlon)`` and ``(nt, 1, 1)``.  Default
        :func:`default_field`.  The stored values are ``scale * f + offset``.
    dlat, dlon
        Regular global grid spacing (``dlon`` defaults to ``dlat``); ignored when ``lat`` /
        ``lon`` give the centres explicitly.
    lat_bounds, lon_bounds
        Explicit bounds ``(n, 2)`` written to the file (in the file's orientation);
        default half-way between centres.
    lat_descending, lon_0_360
        Store latitude north to south, longitude in [0, 360).
    names
        Coordinate names, e.g. ``{"lat": "y", "lon": "x", "time": "t"}``.
    identify_by
        Which CF attributes the coordinates carry: ``"all"``, ``"none"`` or any of
        ``standard_name``, ``axis``, ``units`` (a string or a sequence).  The time
        coordinate always carries ``units`` (it is needed to be a time at all).
    bounds, bounds_names
        Write ``lat_bnds``/``lon_bnds`` (or the given names) and the ``bounds`` attribute.
    calendar
        Written verbatim to the time variable (``None`` leaves it out); dates are
        encoded with cftime in this calendar, or in ``standard`` if cftime does not know it.
    start_year, years, months
        Monthly steps from January ``start_year`` for ``years`` years, or the explicit
        ``(year, month)`` list ``months``.
    with_time
        ``False`` writes a field without a time dimension.
    nan_mask
        ``mask(lat, lon) -> bool`` (physical degrees) or a boolean array in the file's
        orientation; True cells are NaN in every time step.
    land_fraction
        ``frac(lat, lon) -> 0..1``; written as ``sftlf`` in ``land_units`` (``%`` or ``1``).
    cell_area
        ``"exact"`` or an array ``(nlat, nlon)`` written as ``areacella`` (m²) and linked
        through ``cell_measures``.
    """
    names = {"lat": "lat", "lon": "lon", "time": "time", **(names or {})}
    dlon = dlat if dlon is None else dlon
    lat_c = centres(dlat, start=-90.0, stop=90.0) if lat is None else np.asarray(lat, dtype=float)
    if lon is None:
        lon_c = centres(dlon, start=0.0, stop=360.0) if lon_0_360 else centres(dlon, start=-180.0, stop=180.0)
    else:
        lon_c = np.asarray(lon, dtype=float)
    lat_b = _edges_bounds(lat_c, clip=True) if lat_bounds is None else np.asarray(lat_bounds, dtype=float)
    lon_b = _edges_bounds(lon_c, clip=False) if lon_bounds is None else np.asarray(lon_bounds, dtype=float)
    if lat_descending:
        lat_c, lat_b = lat_c[::-1], lat_b[::-1, ::-1]

    if with_time:
        if months is None:
            months = [(y, m) for y in range(start_year, start_year + years) for m in range(1, 13)]
        known = calendar if calendar is not None and calendar in _CFTIME_CALENDARS else "standard"
        dates = [cftime.datetime(y, m, min(day, 28), calendar=known) for y, m in months]
        tvals = np.asarray(cftime.date2num(dates, time_units, calendar=known), dtype="float64")
        year = np.array([y for y, _ in months], dtype=float)[:, None, None]
        month = np.array([m for _, m in months], dtype=float)[:, None, None]
    else:
        year = np.array([[[2000.0]]])
        month = np.array([[[1.0]]])

    lat2, lon2 = np.meshgrid(lat_c, ((lon_c + 180.0) % 360.0) - 180.0, indexing="ij")
    f = default_field if field is None else field
    data = scale * np.broadcast_to(f(lat2[None], lon2[None], year, month), (year.shape[0], *lat2.shape)) + offset
    data = np.array(data, dtype=dtype)
    if nan_mask is not None:
        mask = nan_mask(lat2, lon2) if callable(nan_mask) else np.asarray(nan_mask, dtype=bool)
        data[:, np.broadcast_to(mask, lat2.shape)] = np.nan

    la, lo, ti = names["lat"], names["lon"], names["time"]
    dims = (ti, la, lo) if with_time else (la, lo)
    vattrs: dict[str, str] = {}
    if units is not None:
        vattrs["units"] = units
    if standard_name is not None:
        vattrs["standard_name"] = standard_name
    ds = xr.Dataset(
        {variable: (dims, data if with_time else data[0], vattrs)},
        coords={
            la: (la, lat_c, _coord_attrs("lat", identify_by)),
            lo: (lo, lon_c, _coord_attrs("lon", identify_by)),
        },
        attrs={"Conventions": "CF-1.10", "title": "test field", **(global_attrs or {})},
    )
    if with_time:
        tattrs = {**_coord_attrs("time", identify_by), "units": time_units}
        if calendar is not None:
            tattrs["calendar"] = calendar
        ds = ds.assign_coords({ti: (ti, tvals, tattrs)})
    if bounds:
        bn = {"lat": f"{la}_bnds", "lon": f"{lo}_bnds", **(bounds_names or {})}
        ds[bn["lat"]] = ((la, "nv"), lat_b)
        ds[bn["lon"]] = ((lo, "nv"), lon_b)
        ds[la].attrs["bounds"] = bn["lat"]
        ds[lo].attrs["bounds"] = bn["lon"]
    if cell_area is not None:
        area = exact_area(lat_b, lon_b) if isinstance(cell_area, str) else np.asarray(cell_area, dtype=float)
        ds["areacella"] = ((la, lo), area, {"units": "m2", "standard_name": "cell_area"})
        ds[variable].attrs["cell_measures"] = "area: areacella"
    if land_fraction is not None:
        frac = np.clip(land_fraction(lat2, lon2), 0.0, 1.0)
        values = frac * 100.0 if land_units in ("%", "percent") else frac
        ds["sftlf"] = ((la, lo), values.astype("float32"), {"units": land_units, "standard_name": "land_area_fraction"})
    for name, spec in (extra_variables or {}).items():
        ds[name] = (spec["dims"], spec["data"], dict(spec.get("attrs", {})))
    return ds


_CFTIME_CALENDARS = {
    "standard", "gregorian", "proleptic_gregorian", "noleap", "365_day", "all_leap", "366_day", "360_day", "julian",
}  # fmt: skip


def write_cf(path: str | Path, **options) -> Path:
    """Write :func:`cf_dataset` (``options``) to ``path`` as NetCDF4 with no fill-value tricks."""
    ds = cf_dataset(**options)
    # keep coordinates and bounds free of _FillValue (CF: coordinates have no missing values)
    encoding = {name: {"_FillValue": None} for name in itertools.chain(ds.coords, [v for v in ds.data_vars if "nv" in ds[v].dims])}
    ds.to_netcdf(path, encoding=encoding, format="NETCDF4")
    return Path(path)


@contextmanager
def netcdf_dataset(path):
    """``netCDF4.Dataset(path)`` opened and used under xarray's lock of the netCDF-C/HDF5
    library: a test's in-process server reads files on its own threads through xarray, and
    the library must not be entered from two threads at once (the netCDF-C documentation
    on thread safety; the suite crashed with a bus error when a test read a file directly)."""
    import netCDF4
    from xarray.backends.netCDF4_ import NETCDF4_PYTHON_LOCK

    with NETCDF4_PYTHON_LOCK, netCDF4.Dataset(path) as ds:
        yield ds


def ar1(rng: np.random.Generator, phi: float, n: int, cells: int) -> np.ndarray:
    """AR(1) noise x_t = phi x_{t-1} + e_t of unit innovations, (n, cells), after a spin-up of 50 steps."""
    x = np.zeros((n + 50, cells))
    e = rng.standard_normal((n + 50, cells))
    for t in range(1, n + 50):
        x[t] = phi * x[t - 1] + e[t]
    return x[50:]
