"""What horizontal grid a dataset is on: :class:`GridDescription` and :func:`describe`.

Each grid kind has its own module (``regular``, ``rotated``, ``curvilinear``,
``unstructured``) with a ``find(ds)`` that recognises it from CF attributes and returns a
description, or ``None``.  :func:`describe` asks them in the order of :data:`FINDERS`;
the first that recognises the dataset wins.  Order matters: a rotated-pole grid has 1-D
coordinates with ``axis = Y/X`` that would otherwise pass for geographic ones.
"""

from __future__ import annotations

import os
from collections.abc import Callable
from dataclasses import dataclass, field

import numpy as np
import xarray as xr

from ..errors import InputError

__all__ = ["GridDescription", "GRID_KINDS", "CANONICAL_DIMS", "describe", "attr", "horizontal_dims_of"]

#: Grid kinds, and the canonical horizontal dimensions each has after normalising.
CANONICAL_DIMS: dict[str, tuple[str, ...]] = {
    "regular": ("lat", "lon"),
    "rotated": ("y", "x"),
    "curvilinear": ("y", "x"),
    "unstructured": ("cell",),
}
GRID_KINDS = tuple(CANONICAL_DIMS)


@dataclass(frozen=True)
class GridDescription:
    """The horizontal grid of a file, as found (before normalising).

    Attributes
    ----------
    kind
        ``regular``, ``rotated``, ``curvilinear`` or ``unstructured``.
    dims
        The file's horizontal dimension names, in canonical order: (latitude, longitude),
        (y, x) or (cell,).
    shape
        Sizes of ``dims``.
    lat, lon
        Names of the variables holding the centres (for ``rotated``: the rotated
        coordinates ``rlat``/``rlon``).
    how
        One sentence saying how the grid was recognised (for ``check`` and provenance).
    angle_units
        ``degrees`` or ``radians`` (unstructured meshes often store radians).
    mapping
        CF grid-mapping attributes (rotated pole), as sorted (key, value) pairs.
    notes
        Plain sentences about assumptions made while reading (shown by ``check``).
    """

    kind: str
    dims: tuple[str, ...]
    shape: tuple[int, ...]
    lat: str
    lon: str
    how: str
    angle_units: str = "degrees"
    mapping: tuple[tuple[str, str], ...] = ()
    notes: tuple[str, ...] = field(default_factory=tuple)

    @property
    def canonical_dims(self) -> tuple[str, ...]:
        """The dimension names after normalising."""
        return CANONICAL_DIMS[self.kind]

    @property
    def cells(self) -> int:
        return int(np.prod(self.shape))

    @property
    def rename(self) -> dict[str, str]:
        """File dimension name -> canonical name."""
        return dict(zip(self.dims, self.canonical_dims, strict=True))

    def holds(self, var: xr.DataArray | xr.Variable) -> bool:
        """True when ``var`` lies on this grid (has every horizontal dimension)."""
        return set(self.dims) <= set(var.dims)

    def summary(self) -> str:
        """``rotated 201x194 (rlat, rlon)`` — the kind, the shape and the file's names."""
        return f"{self.kind} {'x'.join(map(str, self.shape))} ({', '.join(self.dims)})"


def attr(var: xr.Variable | xr.DataArray, key: str) -> str | None:
    """An attribute that xarray may have moved to ``encoding`` while decoding."""
    value = var.attrs.get(key, var.encoding.get(key))
    return None if value is None else str(value)


def _finders() -> tuple[Callable[[xr.Dataset], GridDescription | None], ...]:
    from . import curvilinear, regular, rotated, unstructured

    return (rotated.find, regular.find, curvilinear.find, unstructured.find)


def describe(ds: xr.Dataset, *, where: str | os.PathLike[str] | list | None = None) -> GridDescription:
    """The horizontal grid of ``ds`` (raw or decoded), checked for values that cannot be right.

    Raises
    ------
    InputError
        No latitude/longitude found; latitudes NaN or beyond ±90°; repeated latitudes or
        longitudes; a grid of a single cell.  The message names the true problem.

    Notes
    -----
    Only coordinates are read, never data variables.
    """
    for find in _finders():
        desc = find(ds)
        if desc is not None:
            _check_values(ds, desc, where)
            return desc
    raise _nothing_found(ds, where)


def horizontal_dims_of(ds: xr.Dataset) -> tuple[str, ...] | None:
    """The file's horizontal dimensions, or None when no grid is recognised (no checks)."""
    for find in _finders():
        desc = find(ds)
        if desc is not None:
            return desc.dims
    return None


def _nothing_found(ds: xr.Dataset, where) -> InputError:
    from .regular import LAT_UNITS, LON_UNITS, unit_key

    lat_like = [str(n) for n, v in ds.variables.items() if unit_key(attr(v, "units")) in LAT_UNITS or attr(v, "standard_name") == "latitude"]
    lon_like = [str(n) for n, v in ds.variables.items() if unit_key(attr(v, "units")) in LON_UNITS or attr(v, "standard_name") == "longitude"]
    if not lat_like:
        return InputError(
            "no latitude coordinate found by CF attributes",
            file=where,
            remedy="give the latitude coordinate standard_name='latitude' or units='degrees_north'",
        )
    if not lon_like:
        return InputError(
            "no longitude coordinate found by CF attributes",
            file=where,
            remedy="give the longitude coordinate standard_name='longitude' or units='degrees_east'",
        )
    dims = {n: ds[n].dims for n in lat_like + lon_like}
    return InputError(
        f"latitude ({', '.join(lat_like)}) and longitude ({', '.join(lon_like)}) were found but do not describe one grid "
        f"(dimensions {', '.join(f'{k}{tuple(v)}' for k, v in dims.items())})",
        file=where,
        remedy="give latitude and longitude on the same dimensions (1-D each for a regular grid, 2-D for a curvilinear one, "
        "or 1-D on one cell dimension for a mesh), or a CF grid_mapping for rotated coordinates",
    )


def _has_bounds(ds: xr.Dataset, name: str | None) -> bool:
    """Whether coordinate ``name`` names a bounds variable of two values per cell that the file holds."""
    if name is None or name not in ds.variables:
        return False
    bounds = ds[name].attrs.get("bounds", ds[name].encoding.get("bounds"))
    return bounds is not None and str(bounds) in ds.variables and ds[str(bounds)].shape[-1] == 2


def _check_values(ds: xr.Dataset, desc: GridDescription, where) -> None:
    """Refuse grids whose coordinates would be scored silently wrong."""
    if desc.cells < 2 and not (desc.kind == "regular" and _has_bounds(ds, desc.lat) and _has_bounds(ds, desc.lon)):
        # one cell without bounds has no known extent: an inferred one would weigh it wrongly
        # against the reference.  With CF bounds (a box-mean series such as a Nino index)
        # its area is exact and the means, biases and trends are right; pattern statistics
        # of one cell are undefined and come out NaN.
        raise InputError(
            f"the grid has a single cell ({desc.summary()}) and its extent is not in the file",
            file=where,
            remedy="give the cell's latitude and longitude CF bounds (e.g. lat_bnds, lon_bnds), or the field on its full grid",
        )
    if desc.kind == "rotated":
        return  # true latitudes come from the rotation; rotated.find checks the rotated axes
    lat = np.asarray(ds[desc.lat].values, dtype="float64")
    if desc.angle_units == "radians":
        lat = np.rad2deg(lat)
    if not np.all(np.isfinite(lat)):
        raise InputError(
            f"latitude '{desc.lat}' has missing (NaN or fill) values",
            file=where,
            remedy="give every cell a latitude (masked coordinates cannot be placed on the sphere)",
        )
    if np.any(np.abs(lat) > 90.0 + 1e-6):
        raise InputError(
            f"latitude '{desc.lat}' has values beyond ±90° ({float(np.min(lat)):g} to {float(np.max(lat)):g})",
            file=where,
            remedy="check the latitude units (radians vs degrees) and values",
        )
    if desc.kind == "regular":
        lon = np.asarray(ds[desc.lon].values, dtype="float64")
        for name, values in ((desc.lat, lat), (desc.lon, ((lon + 180.0) % 360.0) - 180.0)):
            if np.unique(np.round(values, 9)).size < values.size:
                raise InputError(
                    f"coordinate '{name}' repeats a value (each cell must have its own position)",
                    file=where,
                    remedy="drop the repeated row or column (e.g. a cyclic longitude column at 360° next to 0°)",
                )
        if not np.all(np.isfinite(lon)):
            raise InputError(f"longitude '{desc.lon}' has missing values", file=where, remedy="give every column a longitude")
