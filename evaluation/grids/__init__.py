"""Horizontal grids: how each kind is found in a file, its canonical form, and remapping.

One module per grid kind, each with ``find(ds)`` (recognise it, return a
:class:`GridDescription`) and ``canonical(out, raw, desc)`` (centres, corners, areas):

=================  =========================================================================
``regular``        1-D latitude and longitude (dims ``lat``, ``lon``)
``rotated``        rotated-pole grid, CF ``rotated_latitude_longitude`` (dims ``y``, ``x``)
``curvilinear``    2-D latitude and longitude (dims ``y``, ``x``)
``unstructured``   mesh: 1-D latitude and longitude per cell (dim ``cell``)
=================  =========================================================================

``target`` parses ``--target-grid`` and builds regular target grids; ``remap`` holds the
registry ``{(kind, method): function}`` that brings any kind onto a regular grid;
``spherical`` the geometry they share.
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np
import xarray as xr

from . import curvilinear, regular, rotated, unstructured
from .description import CANONICAL_DIMS, GRID_KINDS, GridDescription, describe, horizontal_dims_of
from .regular import cell_area, infer_bounds
from .remap import REGRID_METHODS, REMAPPERS, describe_method, regrid
from .spherical import EARTH_RADIUS

__all__ = [
    "EARTH_RADIUS",
    "GRID_KINDS",
    "CANONICAL_DIMS",
    "GridDescription",
    "describe",
    "horizontal_dims_of",
    "canonical",
    "kind_of",
    "grid_of",
    "same_grid",
    "cell_area",
    "infer_bounds",
    "REGRID_METHODS",
    "REMAPPERS",
    "describe_method",
    "regrid",
]

_CANONICAL: dict[str, Callable[[xr.Dataset, xr.Dataset, GridDescription], xr.Dataset]] = {
    "regular": regular.canonical,
    "rotated": rotated.canonical,
    "curvilinear": curvilinear.canonical,
    "unstructured": unstructured.canonical,
}

# coordinates that describe the horizontal grid (kept by grid_of)
_GRID_COORDS = ("lat", "lon", "lat_bnds", "lon_bnds", "cell_area", "y", "x", "y_bnds", "x_bnds", "crs")


def canonical(out: xr.Dataset, raw: xr.Dataset, desc: GridDescription) -> xr.Dataset:
    """Give ``out`` (data already on the canonical dims of ``desc``) its grid coordinates.

    ``raw`` is the dataset as read, for the file's coordinate and bounds variables.
    """
    return _CANONICAL[desc.kind](out, raw, desc)


def kind_of(obj: xr.Dataset | xr.DataArray) -> str:
    """The grid kind of a normalised object, read from its dimensions and coordinates."""
    if "cell" in obj.dims:
        return "unstructured"
    if "y" in obj.dims and "x" in obj.dims:
        crs = obj.coords.get("crs")
        if crs is not None and crs.attrs.get("grid_mapping_name") == rotated.MAPPING_NAME:
            return "rotated"
        return "curvilinear"
    return "regular"


def grid_of(obj: xr.DataArray | xr.Dataset) -> xr.Dataset:
    """The horizontal grid of a normalised object: centres, bounds, cell areas (and the pole)."""
    coords = {name: obj.coords[name] for name in _GRID_COORDS if name in obj.coords}
    return xr.Dataset(coords=coords, attrs={"grid_kind": kind_of(obj)})


def same_grid(a: xr.DataArray | xr.Dataset, b: xr.DataArray | xr.Dataset, *, atol: float = 1e-6) -> bool:
    """True when both objects sit on the same kind of grid with the same centres."""
    if kind_of(a) != kind_of(b):
        return False
    dims = CANONICAL_DIMS[kind_of(a)]
    if any(d not in a.sizes or d not in b.sizes or a.sizes[d] != b.sizes[d] for d in dims):
        return False
    return bool(np.allclose(a["lat"].values, b["lat"].values, atol=atol)) and bool(np.allclose(a["lon"].values, b["lon"].values, atol=atol))
