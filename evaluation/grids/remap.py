"""Bringing a field on any grid kind onto a regular target grid.

:data:`REMAPPERS` is the registry ``{(source kind, method): Remapper}``; :func:`regrid`
looks the pair up and runs it.  A method a kind cannot do is absent from the registry
and refused with the methods that kind has.

=================  ===========================  =====================  ==============
source kind        conservative                 bilinear               nearest
=================  ===========================  =====================  ==============
regular            exact overlaps (xarray-      linear in lat/lon      nearest centre
                   regrid interval tools)       (xarray-regrid)
rotated            exact overlaps of the        bilinear in rotated    nearest centre
                   sampled cells (shapely)      coordinates (scipy)
curvilinear        as rotated                   pyresample bilinear    nearest centre
unstructured       exact overlaps of the        —                      nearest centre
                   Voronoi cells (global
                   meshes); else area-weighted
                   mean of the cells centred
                   in each target cell
                   (approximately conservative)
=================  ===========================  =====================  ==============
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from importlib import import_module
from typing import Literal

import xarray as xr

from ..errors import InputError
from ..request import REGRID_METHODS  # the command line offers them without importing xarray

__all__ = ["REGRID_METHODS", "RegridMethod", "Remapper", "REMAPPERS", "regrid", "describe_method"]

RegridMethod = Literal["conservative", "bilinear", "nearest"]


@dataclass(frozen=True)
class Remapper:
    """One way of bringing one grid kind onto a regular grid.

    ``function(da, source_grid, target) -> DataArray on target lat/lon``; ``label`` is the
    sentence the provenance shows.
    """

    function: Callable[[xr.DataArray, xr.Dataset, xr.Dataset], xr.DataArray]
    label: str


#: Sample points per cell edge, at least, of the conservative maps from rotated and
#: curvilinear grids (:mod:`evaluation.grids.remap_polygons`).
EDGE_POINTS = 16


def _lazy(module: str, name: str, **keywords: str) -> Callable[[xr.DataArray, xr.Dataset, xr.Dataset], xr.DataArray]:
    """``module.name(da, grid, target, **keywords)``, the module imported on the first call:
    the remapping modules import scipy.sparse, shapely and pyresample (about 1 s), which a
    request whose sources share the target grid never needs."""

    def call(da: xr.DataArray, grid: xr.Dataset, target: xr.Dataset) -> xr.DataArray:
        return getattr(import_module(f"{__package__}.{module}"), name)(da, grid, target, **keywords)

    return call


def _polygons(kind: str) -> Callable[[xr.DataArray, xr.Dataset, xr.Dataset], xr.DataArray]:
    return _lazy("remap_polygons", "conservative", kind=kind)


_EXACT = "first-order conservative, exact overlap areas of the cells (Jones 1999)"
_SAMPLED = f"first-order conservative, exact overlaps of the cells sampled with at least {EDGE_POINTS} points per edge (Jones 1999)"
_NEAREST = "nearest source cell centre (target cells more than two source spacings away stay missing)"

REMAPPERS: dict[tuple[str, str], Remapper] = {
    ("regular", "conservative"): Remapper(_lazy("remap_regular", "conservative"), _EXACT),
    ("regular", "bilinear"): Remapper(_lazy("remap_regular", "bilinear"), "bilinear in latitude and longitude"),
    ("regular", "nearest"): Remapper(_lazy("remap_points", "nearest"), _NEAREST),
    ("rotated", "conservative"): Remapper(_polygons("rotated"), _SAMPLED),
    ("rotated", "bilinear"): Remapper(_lazy("remap_points", "bilinear_rotated"), "bilinear in rotated latitude and longitude"),
    ("rotated", "nearest"): Remapper(_lazy("remap_points", "nearest"), _NEAREST),
    ("curvilinear", "conservative"): Remapper(_polygons("curvilinear"), _SAMPLED),
    ("curvilinear", "bilinear"): Remapper(_lazy("remap_points", "bilinear"), "bilinear between the four nearest centres (pyresample)"),
    ("curvilinear", "nearest"): Remapper(_lazy("remap_points", "nearest"), _NEAREST),
    ("unstructured", "conservative"): Remapper(
        _lazy("remap_polygons", "mesh_conservative"),
        "first-order conservative, exact overlaps of the spherical Voronoi cells of the mesh centres (global meshes); "
        "where the file gives the cell areas (regional meshes): area-weighted mean of the cells whose centres lie in each "
        "target cell, nearest cell where none (approximately conservative)",
    ),
    ("unstructured", "nearest"): Remapper(_lazy("remap_points", "nearest"), _NEAREST),
}


def _kind(source_grid: xr.Dataset | None, da: xr.DataArray) -> str:
    from . import kind_of

    if source_grid is not None and "grid_kind" in source_grid.attrs:
        return str(source_grid.attrs["grid_kind"])
    return kind_of(source_grid if source_grid is not None else da)


def _remapper(kind: str, method: str) -> Remapper:
    if method not in REGRID_METHODS:
        raise InputError(f"unknown regrid method '{method}'", remedy=f"use one of {', '.join(REGRID_METHODS)}")
    if (kind, method) not in REMAPPERS:
        offered = [m for (k, m) in REMAPPERS if k == kind]
        raise InputError(f"'{method}' remapping is not available from {kind} grids", remedy=f"use --regrid {' or '.join(offered)}")
    return REMAPPERS[(kind, method)]


def describe_method(kind: str, method: str) -> str:
    """The provenance sentence for remapping a ``kind`` grid with ``method``."""
    return _remapper(kind, method).label


def regrid(
    da: xr.DataArray,
    target: xr.Dataset | xr.DataArray,
    *,
    method: RegridMethod | str = "conservative",
    source_grid: xr.Dataset | None = None,
) -> xr.DataArray:
    """Remap a normalised field onto the regular grid of ``target``.

    Parameters
    ----------
    da
        Field on any grid kind in canonical form (``lat``/``lon``, ``y``/``x`` or ``cell``).
        Other dimensions are carried along lazily.
    target
        A normalised regular grid (its ``lat``, ``lon``, bounds and ``cell_area``).
    method
        ``conservative`` (default; right for fluxes and means), ``bilinear`` (smooth
        fields), or ``nearest``.
    source_grid
        The source's grid (:func:`evaluation.grids.grid_of`) when ``da`` does not carry
        its grid coordinates (bounds, areas, the pole).

    Notes
    -----
    Missing source cells are skipped by the conservative and nearest maps (a target cell
    is missing where no valid source cell reaches it) and propagate through bilinear
    ones.  The result carries the target's grid coordinates, including ``cell_area``.
    """
    from . import grid_of

    kind = _kind(source_grid, da)
    remapper = _remapper(kind, method)
    grid = source_grid if source_grid is not None else grid_of(da)
    if kind == "regular" and isinstance(target, xr.DataArray):
        target = grid_of(target)
    out = remapper.function(da, grid, target)  # type: ignore[arg-type]
    out = out.assign_coords(lat=target["lat"].values, lon=target["lon"].values)
    if "cell_area" in target.coords:
        out = out.assign_coords(cell_area=target.coords["cell_area"])
    out.attrs = dict(da.attrs)
    return out
