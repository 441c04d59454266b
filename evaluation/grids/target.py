"""The one regular grid every source is brought onto: ``--target-grid reference|NAME|RES``.

* ``reference`` (default): the primary reference's grid;
* ``NAME``: the grid of the source called NAME;
* ``RES`` such as ``2.5x2.5`` or ``1x1``: a global regular grid of that spacing in degrees
  (latitude x longitude), cell edges on multiples of the spacing from -90 and -180.

A chosen source whose grid is not regular (rotated, curvilinear, mesh) is replaced by a
regular grid of about its mean spacing — the spacing from :data:`SPACINGS` nearest to
√(mean cell area) — over the latitude/longitude box its cells cover (edges on multiples
of the spacing), and the provenance says so.
"""

from __future__ import annotations

import re
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import xarray as xr

from ..errors import InputError
from .regular import cell_area
from .spherical import EARTH_RADIUS

__all__ = ["TargetChoice", "SPACINGS", "parse_target_grid", "regular_grid", "regular_near", "covered_part"]

#: Spacings (degrees) offered for a grid close to an irregular one: each divides 180 and 360.
SPACINGS = (0.1, 0.125, 0.2, 0.25, 0.5, 0.75, 1.0, 1.25, 1.5, 2.0, 2.5, 3.0, 4.0, 5.0, 7.5, 10.0)
_RES = re.compile(r"^\s*(\d+(?:\.\d+)?)\s*x\s*(\d+(?:\.\d+)?)\s*$", re.IGNORECASE)
REMEDY = "use --target-grid reference, the name of a source, or a spacing in degrees such as 2.5x2.5 or 1x1"


@dataclass(frozen=True)
class TargetChoice:
    """What ``--target-grid`` asked for: a source's grid (``source``) or a spacing."""

    text: str
    source: str | None = None
    dlat: float | None = None
    dlon: float | None = None

    @property
    def is_resolution(self) -> bool:
        return self.dlat is not None


def _divides(d: float, total: float) -> bool:
    return d > 0 and abs(total / d - round(total / d)) < 1e-9


def parse_target_grid(text: str | None, *, sources: Sequence[str] = (), reference: str | None = None) -> TargetChoice:
    """``reference``, a source name, or ``DLATxDLON`` in degrees -> :class:`TargetChoice`.

    Raises
    ------
    InputError
        An unknown name, or a spacing that does not divide 180° (latitude) and 360°
        (longitude).
    """
    value = "reference" if text is None or not str(text).strip() else str(text).strip()
    if value == "reference":
        return TargetChoice(text=value, source=reference)
    if value in sources:
        return TargetChoice(text=value, source=value)
    m = _RES.match(value)
    if m is None:
        known = f" (sources: {', '.join(sources)})" if sources else ""
        raise InputError(f"unknown target grid '{value}'{known}", remedy=REMEDY)
    dlat, dlon = float(m.group(1)), float(m.group(2))
    if not (_divides(dlat, 180.0) and _divides(dlon, 360.0)) or dlat > 90.0 or dlon > 180.0:
        raise InputError(
            f"target grid '{value}': the spacing must divide 180° in latitude and 360° in longitude",
            remedy="use e.g. 0.25x0.25, 0.5x0.5, 1x1, 2x2, 2.5x2.5 or 5x5",
        )
    return TargetChoice(text=f"{dlat:g}x{dlon:g}", dlat=dlat, dlon=dlon)


def regular_grid(dlat: float, dlon: float, *, south: float = -90.0, north: float = 90.0, west: float = -180.0, east: float = 180.0) -> xr.Dataset:
    """A regular grid (normalised form: centres, bounds, exact cell areas) of the given spacing.

    Edges lie on multiples of the spacing from -90 and -180; the box is widened outward to them.
    """
    s = -90.0 + dlat * np.floor((south + 90.0) / dlat + 1e-9)
    n = -90.0 + dlat * np.ceil((north + 90.0) / dlat - 1e-9)
    w = -180.0 + dlon * np.floor((west + 180.0) / dlon + 1e-9)
    e = -180.0 + dlon * np.ceil((east + 180.0) / dlon - 1e-9)
    lat_edges = s + dlat * np.arange(round((n - s) / dlat) + 1)
    lon_edges = w + dlon * np.arange(round((e - w) / dlon) + 1)
    lat_b = np.stack([lat_edges[:-1], lat_edges[1:]], axis=1)
    lon_b = np.stack([lon_edges[:-1], lon_edges[1:]], axis=1)
    lat, lon = lat_b.mean(axis=1), lon_b.mean(axis=1)
    return xr.Dataset(
        coords={
            "lat": ("lat", lat, {"standard_name": "latitude", "units": "degrees_north", "bounds": "lat_bnds"}),
            "lon": ("lon", lon, {"standard_name": "longitude", "units": "degrees_east", "bounds": "lon_bnds"}),
            "lat_bnds": (("lat", "nv"), lat_b),
            "lon_bnds": (("lon", "nv"), lon_b),
            "cell_area": cell_area(lat_b, lon_b, lat=lat, lon=lon),
        },
        attrs={"grid_kind": "regular"},
    )


def regular_near(grid: xr.Dataset) -> tuple[xr.Dataset, float]:
    """A regular grid close to an irregular one: (grid, the irregular grid's mean spacing in degrees).

    The spacing is the entry of :data:`SPACINGS` nearest (in ratio) to √(mean cell area);
    the box covers every cell corner (every centre for a mesh), the whole globe when the
    cells do, and all longitudes when the cells cross the dateline.
    """
    area = np.asarray(grid["cell_area"].values, dtype="float64")
    mean = float(np.rad2deg(np.sqrt(np.nanmean(area)) / EARTH_RADIUS))
    d = min(SPACINGS, key=lambda s: abs(np.log(s / mean)))
    lat = grid["lat_bnds"].values if "lat_bnds" in grid.coords and grid["lat_bnds"].ndim == 3 else grid["lat"].values
    lon = grid["lon_bnds"].values if "lon_bnds" in grid.coords and grid["lon_bnds"].ndim == 3 else grid["lon"].values
    if float(np.nansum(area)) > 0.99 * 4 * np.pi * EARTH_RADIUS**2:
        return regular_grid(d, d), mean
    south, north = float(np.nanmin(lat)), float(np.nanmax(lat))
    west, east = float(np.nanmin(lon)), float(np.nanmax(lon))
    shifted = np.where(lon < 0, lon + 360.0, lon)
    if east - west > 180.0 and float(np.nanmax(shifted) - np.nanmin(shifted)) < east - west:
        west, east = -180.0, 180.0  # the cells straddle the dateline: keep every longitude
    return covered_part(regular_grid(d, d, south=south, north=north, west=west, east=east), grid), mean


def covered_part(target: xr.Dataset, grid: xr.Dataset) -> xr.Dataset:
    """``target`` whose ``cell_area`` (the area weight of every score) is only the part of
    each cell that the regional ``grid``'s cells cover.

    A target cell on the edge of a regional domain is partly outside it; its remapped value
    is the mean over the covered part, so weighting it by the whole cell would count the
    domain's edge too much (measured: 4 % on the global mean of a 62x59 regional model's
    precipitation).  Meshes keep whole cells (their regional map bins cell centres); so does
    a target that ``grid`` covers whole (a global grid: nothing to cut).
    """
    kind = grid.attrs.get("grid_kind")
    if kind not in ("rotated", "curvilinear") or float(np.nansum(grid["cell_area"].values)) > 0.99 * 4 * np.pi * EARTH_RADIUS**2:
        return target
    from .remap_polygons import covered_area

    whole = target["cell_area"]
    part = np.minimum(whole.values, covered_area(grid, target, kind=kind))
    return target.assign_coords(cell_area=whole.copy(data=part).assign_attrs(comment="the part of the cell that the source grid's cells cover"))
