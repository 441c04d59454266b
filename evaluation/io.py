"""Open CF-NetCDF files lazily and bring them into one canonical form.

This is the only module that opens data files.  After :func:`open_source` every dataset
has

* the dimensions ``time``, ``lat``, ``lon`` (found by CF attributes, not by name),
* latitude ascending and longitude in [-180, 180), ascending (wrap-around handled),
* cell bounds ``lat_bnds (lat, nv)`` / ``lon_bnds (lon, nv)``, read from the ``bounds``
  attribute or inferred half-way between centres,
* the coordinate ``cell_area (lat, lon)`` in m², from ``cell_measures`` when the files
  carry the area variable, else exact on the sphere from the bounds,
* times as cftime objects in the file's own calendar.

Data stay lazy (dask) throughout.
"""

from __future__ import annotations

import functools
import inspect
import os
import re
import sys
import threading
import warnings
from collections.abc import Iterable, Sequence

import numpy as np
import xarray as xr
from xarray.backends import BackendArray
from xarray.core import indexing

from . import grids, timecoding
from .errors import InputError

# file identities and paths need no numpy: the warm cached path of the command line uses them
from .request import FileIdentity, chunk_megabytes, expand_paths, file_identity

__all__ = [
    "CF_CALENDARS",
    "FileIdentity",
    "expand_paths",
    "chunk_megabytes",
    "file_identity",
    "find_axis",
    "variables_in",
    "open_source",
    "files_holding",
    "fits_in_memory",
    "normalise",
    "get_variable",
    "FIXED_FIELDS",
]

CF_CALENDARS = timecoding.CF_CALENDARS

# CF standard names of fields that describe the grid or the surface, not the climate: they are
# read beside a source's time series (land and ocean regions), never scored on their own.
FIXED_FIELDS = {
    "land_area_fraction": "a land fraction",
    "cell_area": "cell areas",
    "surface_altitude": "surface altitude",
    "sea_area_fraction": "a sea fraction",
    "sea_floor_depth_below_geoid": "ocean depth",
}

# CF criteria as plain tables (cf-conventions 1.10, sections 4.1-4.4).
_LAT_UNITS = {"degrees_north", "degree_north", "degree_n", "degrees_n", "degreen", "degreesn"}
_LON_UNITS = {"degrees_east", "degree_east", "degree_e", "degrees_e", "degreee", "degreese"}
# "UNIT since DATE", or a bare time unit (origin in a separate attribute, or none at all:
# such a time axis must still be found so that it is refused for its true reason)
_TIME_UNITS = re.compile(r"^\s*(\w+\s+since\s+|(days?|hours?|months?|mon|years?)\s*$)", re.IGNORECASE)
_AXIS_CRITERIA = {
    "lat": {"standard_name": {"latitude"}, "axis": "Y", "units": _LAT_UNITS},
    "lon": {"standard_name": {"longitude"}, "axis": "X", "units": _LON_UNITS},
    "time": {"standard_name": {"time"}, "axis": "T", "units": None},
}

# netCDF-C/HDF5 are not thread-safe (pydata/xarray#4100): every open goes through one lock.
_OPEN_LOCK = threading.RLock()


class _DaskArrayOnceImported(type):
    """``isinstance(x, _DaskArray)`` is ``isinstance(x, dask.array.Array)`` without importing
    dask.array: no object is a dask array before dask.array has been imported."""

    def __instancecheck__(cls, obj: object) -> bool:
        module = sys.modules.get("dask.array")
        return module is not None and isinstance(obj, module.Array)


class _DaskArray(metaclass=_DaskArrayOnceImported):
    pass


def _defer_dask_array_import() -> None:
    """Let xarray ask "is this a dask array?" without importing dask.array.

    xarray answers that question, whenever a variable is made from an array (every
    ``assign_coords``), by importing dask.array when dask is installed: 0.4-0.9 s of a cold
    score on 2 shared cores (dask.array imports scipy.fft), although a source that fits in
    memory is read without dask (:func:`open_source`).  This puts into xarray's cache of
    array types the same answer, given lazily: :class:`_DaskArray` is a dask array type
    only once dask.array is imported, which happens as soon as anything makes a dask
    array.  Nothing is changed when xarray does not have the cache this relies on, or has
    already filled it.
    """
    try:
        from packaging.version import Version
        from xarray.namedarray import pycompat

        cache = pycompat._cached_duck_array_modules
        if "dask" in cache or "dask.array" in sys.modules:
            return
        import dask

        entry = pycompat.DuckArrayModule.__new__(pycompat.DuckArrayModule)
        entry.module, entry.version, entry.type, entry.available = dask, Version(dask.__version__), (_DaskArray,), True
        cache["dask"] = entry
    except Exception:  # another xarray, or no dask: xarray's own way
        return


_defer_dask_array_import()


def _attr(var: xr.Variable | xr.DataArray, key: str) -> str | None:
    """An attribute that xarray may have moved to ``encoding`` while decoding."""
    value = var.attrs.get(key, var.encoding.get(key))
    return None if value is None else str(value)


def find_axis(ds: xr.Dataset, axis: str) -> str | None:
    """Name of the 1-D coordinate that CF attributes identify as ``lat``, ``lon`` or ``time``.

    Looks at ``standard_name``, then ``axis``, then ``units``; names are never used.
    Latitude and longitude are those of a regular grid (:mod:`evaluation.grids.regular`).
    """
    if axis in ("lat", "lon"):
        return grids.regular.find_axis(ds, axis)  # type: ignore[arg-type]
    rules = _AXIS_CRITERIA[axis]
    # ds.variables, not ds[name]: building a DataArray gathers its coordinates, and a file
    # of thousands of variables took minutes (every variable times every variable)
    candidates = [name for name, var in ds.variables.items() if var.ndim == 1 and var.dims[0] == name]
    for key in ("standard_name", "axis", "units"):
        for name in candidates:
            var = ds.variables[name]
            value = _attr(var, key)
            if value is None:
                continue
            if key == "standard_name" and value in rules["standard_name"]:
                return str(name)
            if key == "axis" and value.upper() == rules["axis"]:
                return str(name)
            if key == "units":
                if axis == "time":
                    if _TIME_UNITS.match(value) or np.issubdtype(var.dtype, np.datetime64) or var.dtype == object:
                        return str(name)
                elif value.strip().lower() in rules["units"]:
                    return str(name)
    return None


def _is_gridded(var: xr.DataArray, lat: str, lon: str) -> bool:
    return lat in var.dims and lon in var.dims


def _matches(var: xr.Variable, name: str, wanted: str) -> bool:
    return name == wanted or _attr(var, "standard_name") == wanted


# Variable listings are cached by file identity so that repeated look-ups (the dashboard
# building its menus, every request deciding which files hold a variable) cost one stat.
_LISTING_CACHE: dict[FileIdentity, dict[str, dict[str, str]]] = {}
#: No pandas indexes of the coordinates in a listing, which reads their values only (about 3 ms
#: an open less); xarray before 2025.7 has no such option and builds them.
_NO_INDEXES = {"create_default_indexes": False} if "create_default_indexes" in inspect.signature(xr.open_dataset).parameters else {}


def _listing(path: str) -> dict[str, dict[str, str]]:
    ident = file_identity([path])[0]
    if ident in _LISTING_CACHE:
        return _LISTING_CACHE[ident]
    _check_complete(path)
    try:
        with _OPEN_LOCK, xr.open_dataset(path, decode_times=False, decode_cf=False, **_NO_INDEXES) as ds:
            horizontal = grids.horizontal_dims_of(ds) or ()
            cells = int(np.prod([ds.sizes[d] for d in horizontal])) if horizontal else 0
            steps = str(_raw_steps_per_month(ds))  # sizes dask chunks; here, not in one more open of the file
            out = {}
            time_axis = find_axis(ds, "time")  # once: it looks at every variable
            for name in ds.data_vars:
                var = ds.variables[name]  # not ds[name]: a DataArray gathers every coordinate
                if horizontal and set(horizontal) <= set(var.dims):
                    out[str(name)] = {
                        "standard_name": str(var.attrs.get("standard_name", "")),
                        "units": str(var.attrs.get("units", "")),
                        "long_name": str(var.attrs.get("long_name", "")),
                        "has_time": str(time_axis is not None and time_axis in var.dims),
                        "cells": str(cells),
                        "steps_per_month": steps,
                        "bytes": str(_decoded_bytes(var)),
                        **_level_listing(ds, var, (*horizontal, time_axis)),
                    }
    except InputError:
        raise
    except Exception as exc:  # any failure of the netCDF/HDF5 readers
        raise _unreadable(path, exc) from None
    _LISTING_CACHE[ident] = out
    return out


def _level_listing(ds: xr.Dataset, var: xr.DataArray, horizontal_and_time: tuple) -> dict[str, str]:
    """``levels`` (``1000, 850, 500 hPa``; empty without levels) and ``level_problem``
    (why the vertical axis cannot be used; empty when it can) of a listed variable."""
    from .levels import vertical_block

    extra = [d for d in var.dims if d not in horizontal_and_time]
    if not extra:
        return {"levels": "", "level_problem": ""}
    action, axis, text = vertical_block(ds, var, extra)
    levels = axis.listing() if axis is not None and action != "squeeze" else ""
    return {"levels": levels, "level_problem": text if action == "refuse" else ""}


def _check_complete(path: str) -> None:
    """Refuse a NetCDF-3 file that is shorter than its header says.

    netCDF-C reads the missing tail of a truncated classic-format file as zeros without
    an error, which would be scored silently.  scipy's NetCDF-3 reader checks each
    variable's extent against the file when it maps it (memory-mapped: no data are
    read), so it serves as the completeness check.  HDF5-based files fail on open.
    """
    try:
        fh = open(path, "rb")  # noqa: SIM115 (closed below)
    except OSError as error:  # permission denied is not a truncated file
        reason = error.strerror or type(error).__name__
        raise InputError(f"cannot open the file ({reason.lower()})", file=path,
                         remedy="check that the file is readable by this user (ls -l; chmod u+r)") from None
    try:
        with fh:
            if fh.read(4) not in (b"CDF\x01", b"CDF\x02"):
                return
            from scipy.io import netcdf_file

            fh.seek(0)
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")  # scipy warns about mapped arrays on close
                netcdf_file(fh, mmap=True).close()
    except Exception:
        raise InputError(
            "the file is shorter than its header says (truncated)",
            file=path,
            remedy="copy or download the file again in full",
        ) from None


def _unreadable(path: str, exc: BaseException) -> InputError:
    text = " ".join(str(exc).split()) or type(exc).__name__  # whole: the cause must not be cut off
    return InputError(
        f"cannot read the file ({text})",
        file=path,
        remedy="check that it is a complete NetCDF file (a truncated copy or another format cannot be read)",
    )


def variables_in(paths: Sequence[str]) -> dict[str, dict[str, str]]:
    """Gridded variables found in the files: name -> {standard_name, units, long_name}."""
    out: dict[str, dict[str, str]] = {}
    for p in paths:
        for name, meta in _listing(p).items():
            out.setdefault(name, meta)
    return out


def _files_with(paths: Sequence[str], variable: str) -> list[str]:
    chosen = []
    for p in paths:
        listing = _listing(p)
        if any(name == variable or meta["standard_name"] == variable for name, meta in listing.items()):
            chosen.append(p)
    return chosen


def files_holding(paths: str | Iterable[str], variables: Sequence[str], *, source: str | None = None) -> list[str]:
    """The files of ``paths`` that hold one of ``variables`` (by name or CF standard_name),
    or, for a derived variable no file holds, the files of its inputs; sorted, no repeats.

    These are the files :func:`open_source` opens for the variables (besides fixed fields).
    """
    files = expand_paths(paths, source=source)
    wanted: list[str] = []
    for v in variables:
        holding = _files_with(files, v)
        if not holding:
            # a derived variable (net TOA flux, ...) needs the files of its inputs
            from .derived import DERIVED

            if v in DERIVED:
                holding = [p for name in DERIVED[v].inputs for p in _files_with(files, name)]
        wanted.extend(holding)
    return sorted(set(wanted))


def open_source(
    paths: str | Iterable[str],
    *,
    variables: Sequence[str] | None = None,
    source: str | None = None,
    chunks: dict[str, int] | None = None,
    without_dask: bool = False,
) -> xr.Dataset:
    """Open one source lazily and normalise it.

    Parameters
    ----------
    paths
        A file, a quoted glob or a list of files (already expanded or not).
    variables
        When given, only the files holding one of these variables (by name or CF
        standard_name) are opened, plus files holding fixed fields (cell area, land
        fraction) the variables point to.
    source
        Name of the source, used in messages.
    chunks
        Dask chunks; default whole years of months, as many as fit in about
        ``$GRIDSCORE_CHUNK_MB`` (64) megabytes of float64 per chunk, so that memory is
        bounded by chunk size × worker threads whatever the length of the run.
    without_dask
        When the source is one file of monthly (or coarser) steps whose values fit in
        memory (:func:`fits_in_memory`'s rule) and no dask.distributed client is in use,
        open it without dask: the values stay in the file, read by xarray's lazy
        indexing when they are first used, and neither dask's import (about 0.5 s) nor a
        task graph is paid.  One file of daily (or finer) steps whose monthly means fit
        is opened so too: its monthly means are made a few months at a time as they are
        read (:class:`evaluation.timecoding.MonthlyMeans`).  Otherwise (several files, a
        larger source) the usual dask chunks.

    Raises
    ------
    InputError
        Unreadable or truncated file, no latitude/longitude/time, unknown calendar,
        non-monthly data.
    """
    files = expand_paths(paths, source=source)
    if variables:
        wanted = files_holding(files, variables, source=source)
        fixed = [p for p in files if _fixed_fields_only(p) or any(m["has_time"] == "False" for m in _listing(p).values())]
        files_to_open = sorted(set(wanted) | set(fixed))
        if not wanted:
            for p in files:
                if not _listing(p):
                    _require_horizontal_axes(p)  # "no variable" would hide a missing coordinate
            names = ", ".join(sorted(variables_in(files))) or "none"
            raise InputError(
                f"no variable '{', '.join(variables)}' (by name or standard_name); variables found: {names}",
                file=files,  # the files, so that the message says where to look
                remedy="choose a variable the files hold, or add the files that hold it",
            )
    else:
        files_to_open = files
    timed = [p for p in files_to_open if not _fixed_fields_only(p) and any(m["has_time"] == "True" for m in _listing(p).values())]
    untimed = [p for p in files_to_open if p not in timed]
    steps_per_month = _steps_per_month(timed[0]) if timed and chunks is None else 1.0
    plain = without_dask and chunks is None and _plain_read(timed, steps_per_month)
    if chunks is None:
        cells = max([int(m.get("cells", 0)) for p in files_to_open for m in _listing(p).values()] + [1])
        chunks = {"time": _time_chunk(cells, steps_per_month)}
    if plain:
        chunks = None  # xarray's lazily indexed file arrays
    # times are decoded per file by evaluation.timecoding (calendar spellings, reference
    # dates, months since, separate time origins, bounds midpoints), not by xarray
    raw = {"decode_times": False, "decode_timedelta": False}
    try:
        with _OPEN_LOCK:
            parts = []
            opened: list[xr.Dataset] = []  # as opened: closing them closes every file of the source
            if timed:
                if len(timed) == 1:
                    opened.append(xr.open_dataset(timed[0], chunks=chunks, **raw))
                    parts.append(timecoding.decode(opened[-1], file=timed[0]))
                else:
                    opened.append(
                        xr.open_mfdataset(
                            timed,
                            **raw,
                            preprocess=timecoding.decode,
                            chunks=chunks,
                            combine="by_coords",
                            data_vars="minimal",
                            coords="minimal",
                            compat="override",
                            join="outer",
                            parallel=False,
                        )
                    )
                    parts.append(opened[-1])
            for p in untimed:
                part = xr.open_dataset(p, chunks=None if plain else {}, **raw)
                opened.append(part)
                if _fixed_fields_only(p):
                    # a land fraction stamped with one time step (as regional models write it):
                    # a fixed field, whatever its stamp, beside the source's own time axis
                    step = find_axis(part, "time")
                    if step is not None and part.sizes.get(step) == 1:
                        part = part.isel({step: 0}, drop=True)
                parts.append(timecoding.decode(part, file=p))
    except InputError:
        raise
    except Exception as exc:
        raise _classify_open_error(files_to_open, exc) from None
    ds = parts[0] if len(parts) == 1 else xr.merge(parts, compat="override", join="override", combine_attrs="drop_conflicts")
    ds.attrs.setdefault("gridscore_files", "\n".join(files_to_open))
    out = normalise(ds, source=source or (files_to_open[0] if len(files_to_open) == 1 else None), files=files_to_open)
    # the valid range is applied to each step as read, before sub-monthly steps become monthly
    # means (a month with a value out of range is then missing, as with any missing step) and
    # while a packed variable still has its scale_factor/add_offset
    result = timecoding.canonical(_with_valid_ranges(out))
    # close() closes the source's files, as of any dataset xarray opened (the normalising steps
    # leave it without); the values still in the files are read again through a new opening
    result.set_close(functools.partial(_close_all, opened))
    return result


def _close_all(opened: list[xr.Dataset]) -> None:
    """Close the files of the datasets :func:`open_source` opened for one source: their
    handles and the netCDF library's chunk caches (up to 64 MB a file, kept while it is
    open).  xarray opens a closed file again when its values are read later."""
    with _OPEN_LOCK:
        for ds in opened:
            ds.close()


def _fixed_fields_only(path: str) -> bool:
    """Whether every gridded variable of the file is a fixed field (:data:`FIXED_FIELDS`)."""
    listing = _listing(path)
    return bool(listing) and all(m["standard_name"] in FIXED_FIELDS for m in listing.values())


def _decoded_bytes(var: xr.DataArray) -> int:
    """At least the bytes of ``var``'s values as xarray decodes them (``var`` read undecoded).

    Packed values (``scale_factor``/``add_offset``) and integers with a ``_FillValue`` or
    ``missing_value`` become floats: 8 bytes a value (xarray picks float32 for integers of
    up to 16 bits, so this errs large); a byte of ``int8`` data may be four when decoded.
    """
    floated = {"scale_factor", "add_offset"} & set(var.attrs) or (
        var.dtype.kind in "iu" and {"_FillValue", "missing_value"} & set(var.attrs))
    return int(var.size) * (8 if floated else var.dtype.itemsize)


def _plain_read(timed: Sequence[str], steps_per_month: float) -> bool:
    """Whether :func:`open_source` may open ``timed`` without dask (see its ``without_dask``).

    One file only: several files would be joined along time by copying them into memory
    at once, for every source of a comparison before the first is reduced.
    """
    if len(timed) != 1 or _on_a_cluster():
        return False
    need = sum(int(m.get("bytes", 0)) for m in _listing(timed[0]).values() if m.get("has_time") == "True")
    if steps_per_month > 1.5:
        # sub-monthly steps are read a few months at a time into monthly means
        # (evaluation.timecoding.MonthlyMeans): what must fit is the means, in float64
        # (at most twice the bytes of float32 steps)
        need = 2 * need / steps_per_month
    return 0 < need <= min(LOAD_LIMIT_BYTES, _available_bytes() / 4)


def _raw_steps_per_month(raw: xr.Dataset) -> float:
    try:
        return timecoding.steps_per_month(raw)
    except Exception:  # an unreadable time axis counts as monthly (it is refused, for its reason, when decoded)
        return 1.0


def _steps_per_month(path: str) -> float:
    listed = [float(m["steps_per_month"]) for m in _listing(path).values() if "steps_per_month" in m]
    if listed:
        return listed[0]
    with _OPEN_LOCK, xr.open_dataset(path, decode_times=False, decode_timedelta=False) as raw:
        return _raw_steps_per_month(raw)


def _require_horizontal_axes(path: str) -> None:
    """InputError naming ``path`` and the true problem when no horizontal grid is recognised in it."""
    with _OPEN_LOCK, xr.open_dataset(path, decode_times=False, decode_cf=False) as raw:
        grids.describe(raw, where=path)


#: The most bytes of one source's variable that a comparison reads into memory whole
#: (then reduced with numpy, without a dask graph); larger data are reduced chunk by chunk
#: with dask.  Measured on a 2-core machine: loading and reducing in memory is 2-3x faster
#: for the 2-degree 40-year request of the benchmarks; at 1 GiB of float32 (a century of
#: 1-degree months) the peak memory of a score stays under 2 GB.
LOAD_LIMIT_BYTES = 1 << 30


def fits_in_memory(da: xr.DataArray) -> bool:
    """Whether ``da`` may be read into memory whole: at most :data:`LOAD_LIMIT_BYTES`
    and at most a quarter of the memory the system has available now."""
    if _on_a_cluster():
        # the cluster's workers reduce the data chunk by chunk; reading a source whole
        # would gather it on one worker (and into this process) past its memory limit
        return False
    need = da.size * da.dtype.itemsize
    return need <= min(LOAD_LIMIT_BYTES, _available_bytes() / 4)


def _on_a_cluster() -> bool:
    """Whether a dask.distributed client is the default scheduler (no import otherwise)."""
    if "distributed" not in sys.modules:
        return False
    from distributed import default_client

    try:
        default_client()
    except ValueError:
        return False
    return True


def _available_bytes() -> float:
    """MemAvailable of /proc/meminfo (Linux), else the physical memory."""
    try:
        with open("/proc/meminfo") as fh:
            for line in fh:
                if line.startswith("MemAvailable:"):
                    return float(line.split()[1]) * 1024
    except (OSError, ValueError, IndexError):
        pass
    try:
        return float(os.sysconf("SC_PAGE_SIZE") * os.sysconf("SC_PHYS_PAGES"))
    except (OSError, ValueError):
        return float(LOAD_LIMIT_BYTES)


def _time_chunk(cells: int, steps_per_month: float = 1.0) -> int:
    """Time steps per dask chunk, about GRIDSCORE_CHUNK_MB of float64.

    Whole years of steps when a year fits in the budget, else whole months (daily or
    6-hourly data at high resolution); ``steps_per_month`` is 1 for monthly data.
    A chunk boundary inside a month (months of unequal length) costs nothing but
    a second read: the monthly means are group sums across chunks.
    """
    budget = chunk_megabytes() * 2**20
    per_month = max(1, int(round(steps_per_month)))
    months = int(budget // (per_month * max(cells, 1) * 8))
    if months >= 12:
        return 12 * per_month * (months // 12)
    return per_month * max(1, months)


def _classify_open_error(files: Sequence[str], exc: BaseException) -> InputError:
    """A reader or combine failure as one untruncated line naming its real cause.

    Time decoding problems never arrive here: :mod:`evaluation.timecoding` raises them
    as :class:`InputError` with the attribute to change.
    """
    text = " ".join(str(exc).split()) or type(exc).__name__
    where = files[0] if len(files) == 1 else f"{files[0]} (+{len(files) - 1} more)"
    lowered = text.lower()
    if len(files) > 1 and any(word in lowered for word in ("monotonic", "concat", "combine", "overlap")):
        return InputError(
            f"the files do not fit together along time or space ({text})",
            file=where,
            remedy="give files of one source with the same grid and non-overlapping times",
        )
    return _unreadable(where, exc)


def normalise(ds: xr.Dataset, *, source: str | os.PathLike[str] | None = None, files: Sequence[str] = ()) -> xr.Dataset:
    """Canonical names, orientation, bounds and cell areas (see the module docstring).

    Never mutates ``ds``; returns a new dataset.  Data variables without the horizontal
    dimensions (e.g. time bounds) are dropped.
    """
    # the files, so that a refusal names what to fix (a source's name is not a file)
    where = list(files) if files else source
    desc = grids.describe(ds, where=where)
    time_name = find_axis(ds, "time")
    horizontal = desc.dims
    own = {*horizontal, time_name}

    keep = [v for v in ds.data_vars if desc.holds(ds.variables[v]) and v not in (desc.lat, desc.lon) and not _is_position(ds.variables[v])]
    out = _with_cell_measures(ds, ds[keep], keep, desc)
    # coordinates on other dimensions go; so do the file's own centre variables on the
    # horizontal dimensions (2-D lat/lon, latCell ...): the grid module writes canonical ones
    drop = [
        c for c in out.coords
        if c not in (*horizontal, time_name, "cell_area") and out[c].ndim > 0
        and (not set(out[c].dims) <= own or set(out[c].dims) & set(horizontal))
    ]
    out = out.drop_vars(drop)
    rename = dict(desc.rename)
    if time_name is not None:
        rename[time_name] = "time"
    out = out.rename({k: v for k, v in rename.items() if k != v})
    out, refused, vertical_dims = _vertical(ds, out)
    leftover = [d for d in out.dims if d not in ("time", *desc.canonical_dims, *vertical_dims)]
    if leftover:
        out = out.drop_dims(leftover, errors="ignore")
    out = grids.canonical(out.transpose(..., *desc.canonical_dims), ds, desc)
    if "time" in out.dims:
        _check_time(out, where)
    out.attrs = dict(ds.attrs)
    if refused:
        out.attrs[REFUSED_ATTR] = refused
    return out


#: Dataset attribute of a normalised dataset: variable -> why it cannot be scored.
REFUSED_ATTR = "gridscore_refused"


def _vertical(ds: xr.Dataset, out: xr.Dataset) -> tuple[xr.Dataset, dict[str, str], list[str]]:
    """Vertical axes of the kept variables (see :mod:`evaluation.levels`).

    A single level is squeezed (its text kept in the variable's attribute
    ``gridscore_single_level``); one vertical axis of several levels becomes the
    dimension ``level`` (``level_<name>`` for each axis when variables of one file use
    different axes, renamed to ``level`` by :func:`get_variable`); anything else is
    dropped and its reason recorded, so that asking for it names the true problem.
    """
    from .levels import LEVEL_DIM, level_coordinate, scalar_level, vertical_block

    refused: dict[str, str] = {}
    kept: dict[str, object] = {}
    for v in list(out.data_vars):
        extra = [d for d in out.variables[v].dims if d not in ("time", *_HORIZONTAL_DIMS)]
        if not extra:
            text = scalar_level(out, v)  # a CF scalar coordinate (height = 2 m) names the one level
            if text:
                out[v].attrs["gridscore_single_level"] = text
            continue
        action, axis, text = vertical_block(ds, out[v], extra)
        if action == "squeeze":
            out[v] = out[v].squeeze(extra, drop=True)
            if text:
                out[v].attrs["gridscore_single_level"] = text
        elif action == "keep":
            kept[axis.name] = axis  # type: ignore[union-attr]
            if axis.pressure:  # type: ignore[union-attr]
                # model levels with the pressure of every level: get_variable attaches it
                out[v].attrs["gridscore_pressure"] = axis.pressure  # type: ignore[union-attr]
                if axis.pressure not in out.data_vars:  # type: ignore[union-attr]
                    renamed = dict(zip(ds[v].dims, out[v].dims, strict=True))
                    source = ds[axis.pressure].variable  # type: ignore[union-attr]
                    out[axis.pressure] = xr.Variable([renamed[d] for d in source.dims], source.data, source.attrs)  # type: ignore[union-attr]
        else:
            levels = f" (levels {axis.listing()})" if axis is not None else ""
            refused[str(v)] = f"variable '{v}' cannot be scored: {text}{levels}"
            out = out.drop_vars(v)
    dims = []
    for name, axis in kept.items():
        dim = LEVEL_DIM if len(kept) == 1 else f"{LEVEL_DIM}_{name}"
        if name != dim:
            out = out.rename_dims({name: dim})
        coord = level_coordinate(axis, ds)  # type: ignore[arg-type]
        out = out.assign_coords({dim: (dim, coord.values, coord.attrs)})
        dims.append(dim)
    return out, refused, dims


def _is_position(var: xr.DataArray) -> bool:
    """A latitude or longitude stored as a data variable (not a field to score)."""
    from .grids.curvilinear import is_latitude, is_longitude

    return is_latitude(var) or is_longitude(var) or _attr(var, "units") in ("radian", "radians")


# every canonical horizontal dimension name, whatever the grid kind
_HORIZONTAL_DIMS = tuple(d for dims in grids.CANONICAL_DIMS.values() for d in dims)


def _with_cell_measures(ds: xr.Dataset, out: xr.Dataset, keep: list, desc: grids.GridDescription) -> xr.Dataset:
    """``out`` with the coordinate ``cell_area`` when a kept variable's ``cell_measures``
    names an area variable (m²) on the grid's dimensions; the grid module computes the
    area otherwise."""
    for v in keep:
        m = re.search(r"area:\s*(\S+)", _attr(ds.variables[v], "cell_measures") or "")
        if m and m.group(1) in ds.variables:
            area = ds[m.group(1)]
            if set(area.dims) == set(desc.dims) and str(area.attrs.get("units", "m2")).replace(" ", "") in ("m2", "m^2", "m**2"):
                return out.assign_coords(cell_area=area.astype("float64"))
    return out


def _check_time(ds: xr.Dataset, where) -> None:
    """Refuse a decoded time axis that is not increasing, or monthly data with two steps in a month."""
    t = ds["time"]
    if t.size and not hasattr(t.values[0], "calendar"):
        units = t.attrs.get("units", t.encoding.get("units"))
        cause = "has no units attribute" if units is None else f"has units '{units}', which are not CF time units"
        raise InputError(
            f"the time coordinate {cause}, so its values cannot be placed in time",
            file=where,
            remedy="set time:units to 'UNIT since DATE' (e.g. 'days since 1850-01-01') and time:calendar; "
            "for a climatology also give climatology bounds",
        )
    if t.size > 1:
        values = t.values
        if any(b <= a for a, b in zip(values[:-1], values[1:], strict=True)):
            raise InputError(
                "the time axis is not increasing (steps out of order or repeated)",
                file=where,
                remedy="sort the time axis, and give files whose times do not overlap",
            )
        if timecoding.frequency(t) == "monthly":
            months = np.array([v.year * 12 + v.month for v in values])
            if np.any(np.diff(months) == 0):
                raise InputError(
                    "two time steps fall in one month of data that are otherwise monthly",
                    file=where,
                    remedy="give one value per month, or add time:bounds so that each step's interval is known",
                )


def get_variable(ds: xr.Dataset, name: str, *, source: str | None = None) -> xr.DataArray:
    """The data variable called ``name`` or having ``standard_name == name``.

    Falls back to the derived-variable registry (:mod:`evaluation.derived`) when the
    files do not store it.  Raises :class:`InputError` listing the variables found.
    """
    if name in ds.data_vars:
        return _with_pressure(ds, _one_level_dim(_ranged(ds, ds[name])))
    for vname, var in ds.data_vars.items():
        if _matches(var.variable, str(vname), name):
            return _with_pressure(ds, _one_level_dim(_ranged(ds, var).rename(name)))
    refused = ds.attrs.get(REFUSED_ATTR, {})
    if name in refused:
        raise InputError(
            refused[name],
            file=source or ds.attrs.get("gridscore_files", "").split("\n")[0] or None,
            remedy="give the variable on pressure, height or depth levels with CF attributes (axis, positive, units)",
        )
    try:
        from .derived import derive
    except ImportError:  # the registry is optional for the core
        derive = None
    if derive is not None:
        out = derive(ds, name, source=source)
        if out is not None:
            return out
    found = ", ".join(sorted(map(str, ds.data_vars))) or "none"
    raise InputError(
        f"no variable '{name}' (by name or standard_name); variables found: {found}",
        file=source or ds.attrs.get("gridscore_files", "").split("\n")[0] or None,
        remedy="choose a variable the files hold",
    )


def valid_limits(da: xr.DataArray) -> tuple[float | None, float | None]:
    """(lowest, highest) valid value of ``da`` as decoded, from CF ``valid_range``,
    ``valid_min`` and ``valid_max`` (cf-conventions 2.5.1; None where not given).

    Limits written in the packed type of a packed variable (cf-conventions 8.1) are
    unpacked with its ``scale_factor``/``add_offset``, widened by half a packing step.
    """
    # a limit that is text or NaN is not applied, as netCDF4-python (the netCDF library's
    # Python reader) does not apply it: text "cannot be safely cast" (it warns), and no value
    # compares beyond NaN; gridscore check notes both (ignored_limits)
    attrs = {k: np.ravel(da.attrs[k]) for k in _LIMIT_ATTRS if k in da.attrs and _numeric(da.attrs[k])}
    given = list(attrs.values())
    if not given:
        return None, None
    lo = hi = None
    if "valid_range" in attrs and attrs["valid_range"].size == 2:
        # valid_range first, valid_min/valid_max only without one (netCDF4-python's order)
        lo, hi = (float(v) for v in attrs["valid_range"])
    else:
        if "valid_min" in attrs and attrs["valid_min"].size == 1:
            lo = float(attrs["valid_min"][0])
        if "valid_max" in attrs and attrs["valid_max"].size == 1:
            hi = float(attrs["valid_max"][0])
    lo, hi = (None if v is None or np.isnan(v) else v for v in (lo, hi))
    scale, offset = da.encoding.get("scale_factor"), da.encoding.get("add_offset")
    packed = np.dtype(da.encoding.get("dtype", da.dtype))
    if scale is not None or offset is not None:
        if not all(g.dtype == packed for g in given):
            # the netCDF library compares the packed values with it whatever its type, while
            # older conventions read a range of the unpacked type as unpacked: ambiguous
            kinds = ", ".join(sorted({str(g.dtype) for g in given}))
            raise InputError(
                f"variable '{da.name}' is packed as {packed} (scale_factor/add_offset) but its valid range is written as {kinds}, "
                "so whether the range applies to the packed or the unpacked values cannot be told",
                file=da.encoding.get("source"),
                remedy=f"write valid_range/valid_min/valid_max as {packed} packed values (cf-conventions 8.1), or remove them",
            )
        scale = 1.0 if scale is None else float(scale)
        offset = 0.0 if offset is None else float(offset)
        ends = [None if v is None else v * scale + offset for v in (lo, hi)]
        if scale < 0:
            ends.reverse()
        half = abs(scale) / 2
        lo = None if ends[0] is None else ends[0] - half
        hi = None if ends[1] is None else ends[1] + half
    return lo, hi


_LIMIT_ATTRS = ("valid_range", "valid_min", "valid_max")

#: Attribute of a variable whose valid range :func:`open_source` has applied: [lowest, highest]
#: (-inf/inf where none), so that it is not applied again to monthly means made from its steps.
RANGE_ATTR = "gridscore_valid_range"

#: Dataset attribute: variable -> (problem, remedy, file) of a valid range that cannot be applied.
RANGE_REFUSED_ATTR = "gridscore_range_refused"


def _numeric(value) -> bool:
    return np.asarray(value).dtype.kind in "iuf"


def ignored_limits(name: str, attrs: dict) -> list[str]:
    """One note per valid-range attribute (of variable ``name`` with ``attrs``) that
    :func:`valid_limits` does not apply (text, or NaN), as netCDF4-python does not apply it either."""
    notes = []
    for key in _LIMIT_ATTRS:
        if key not in attrs:
            continue
        if not _numeric(attrs[key]):
            notes.append(f"variable '{name}' has a {key} that is text, not a number: it is not applied (the netCDF library "
                         f"does not apply it either) — write {key} as numbers of the variable's type, or remove it")
        elif np.ravel(attrs[key]).size != (2 if key == "valid_range" else 1):
            notes.append(f"variable '{name}' has a {key} of {np.ravel(attrs[key]).size} values: it is not applied (nor by the "
                         f"netCDF library) — write {'[lowest, highest]' if key == 'valid_range' else 'one value'}, or remove it")
        elif np.isnan(np.ravel(attrs[key]).astype("float64")).any():
            notes.append(f"variable '{name}' has a {key} of NaN: no value is read as missing for that limit (as the "
                         f"netCDF library reads it) — write the limit as a number, or remove it")
    return notes


def valid_range_of(ds: xr.Dataset, name: str) -> tuple[float | None, float | None]:
    """(lowest, highest) valid value of data variable ``name`` of an opened source, as
    :func:`open_source` applied it (it may no longer be computable from monthly means of
    packed steps).  Raises :class:`InputError` when the range cannot be applied."""
    refused = ds.attrs.get(RANGE_REFUSED_ATTR, {})
    if name in refused:
        problem, remedy, file = refused[name]
        raise InputError(problem, file=file or ds.attrs.get("gridscore_files", "").split("\n")[0] or None, remedy=remedy)
    if RANGE_ATTR in ds.variables[name].attrs:
        lo, hi = (float(v) for v in ds.variables[name].attrs[RANGE_ATTR])
        return (None if np.isinf(lo) else lo), (None if np.isinf(hi) else hi)
    return valid_limits(ds[name])


def _with_valid_ranges(ds: xr.Dataset) -> xr.Dataset:
    """``ds`` with each data variable's valid range applied (:func:`_within_valid_range`); a
    range that cannot be applied is kept under :data:`RANGE_REFUSED_ATTR`, refused when the
    variable is asked for (other variables of the file can still be read)."""
    ranged, refused = {}, {}
    for name in ds.data_vars:
        # ds.variables, not ds[name]: a DataArray gathers every coordinate (a file of thousands of variables)
        if not set(_LIMIT_ATTRS) & set(ds.variables[name].attrs):
            continue
        var = ds[name]
        try:
            ranged[name] = _within_valid_range(var)
        except InputError as err:
            refused[name] = (err.problem, err.remedy, err.file)
    if not ranged and not refused:
        return ds
    out = ds.assign(ranged)
    for name, var in ranged.items():
        out[name].encoding = dict(var.encoding)
    if refused:
        out.attrs[RANGE_REFUSED_ATTR] = {**out.attrs.get(RANGE_REFUSED_ATTR, {}), **refused}
    return out


def _ranged(ds: xr.Dataset, da: xr.DataArray) -> xr.DataArray:
    """``da`` (a data variable of ``ds``) with its valid range applied, unless already applied."""
    refused = ds.attrs.get(RANGE_REFUSED_ATTR, {})
    if da.name in refused:
        valid_range_of(ds, str(da.name))
    return da if RANGE_ATTR in da.attrs else _within_valid_range(da)


def _within_valid_range(da: xr.DataArray) -> xr.DataArray:
    """``da`` with values outside its CF valid range missing (xarray does not apply it;
    the netCDF library and cf-conventions 2.5.1 do).

    Values still in the file (opened without dask) stay there: they are masked as they are
    read (:class:`_WithinRange`), so that only the parts used are read.
    """
    lo, hi = valid_limits(da)
    if lo is None and hi is None:
        return da
    if da.chunks is None and not da.variable._in_memory:
        data = indexing.LazilyIndexedArray(_WithinRange(da.variable, lo, hi))
        out = da.copy(data=data)
    else:
        inside = True
        if lo is not None:
            inside = da >= lo
        if hi is not None:
            inside = (da <= hi) & inside
        out = da.where(inside)
    out.attrs, out.encoding = dict(da.attrs), dict(da.encoding)
    out.attrs[RANGE_ATTR] = np.array([-np.inf if lo is None else lo, np.inf if hi is None else hi])
    return out


class _WithinRange(BackendArray):
    """The values of a variable still in the file with those outside [lo, hi] missing, masked
    as each part is read (the same values and type as ``DataArray.where``)."""

    def __init__(self, variable: xr.Variable, lo: float | None, hi: float | None) -> None:
        self.variable, self.lo, self.hi = variable, lo, hi
        self.shape = variable.shape
        kind = np.dtype(variable.dtype)
        # xarray's promotion for missing values: floats keep their type, small integers become float32
        self.dtype = kind if kind.kind == "f" else np.dtype("float32" if kind.itemsize <= 2 else "float64")

    def __getitem__(self, key: indexing.ExplicitIndexer) -> np.ndarray:
        return indexing.explicit_indexing_adapter(key, self.shape, indexing.IndexingSupport.OUTER, self._read)

    def _read(self, key: tuple) -> np.ndarray:
        values = np.asarray(self.variable[key].values)
        out = values.astype(self.dtype, copy=True)
        if self.lo is not None:
            out[values < self.lo] = np.nan
        if self.hi is not None:
            out[values > self.hi] = np.nan
        return out


def _with_pressure(ds: xr.Dataset, da: xr.DataArray) -> xr.DataArray:
    """A variable on model levels with the pressure of every level as coordinate ``level_pressure``."""
    name = da.attrs.get("gridscore_pressure")
    if not name or name not in ds.data_vars:
        return da
    pressure = _one_level_dim(ds[name])
    return da.assign_coords(level_pressure=(pressure.dims, pressure.data, pressure.attrs))


def _one_level_dim(da: xr.DataArray) -> xr.DataArray:
    """A variable's vertical dimension under its canonical name ``level``."""
    named = [d for d in da.dims if str(d).startswith("level_") and d in da.coords and "level_kind" in da[d].attrs]
    return da.rename({named[0]: "level"}) if named else da
