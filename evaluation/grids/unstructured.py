"""Unstructured meshes: one cell dimension, 1-D latitude and longitude per cell.

Found, in this order, through a UGRID mesh variable (``cf_role = mesh_topology``, its
``face_coordinates``), through 1-D latitude/longitude variables on one shared dimension
that is not their own (``standard_name`` or ``units``), or through the names common
models give cell centres (:data:`KNOWN_NAMES`; these are documented in radians).

Angles: ``units`` ``radian(s)``/``rad`` mean radians, ``degrees_north``/``degrees_east``
degrees.  Without units, radians are assumed only for a known name whose values fit
(|latitude| ≤ π/2, longitudes within 2π), and the assumption is noted.

Canonical form: dimension ``cell``; ``lat(cell)``, ``lon(cell)`` in degrees (longitude in
[-180, 180)); ``cell_area (cell)`` in m² from ``cell_measures``, else the areas of the
spherical Voronoi cells of the centres (scipy.spatial.SphericalVoronoi), which tile the
sphere (their sum is 4πR²).  A regional mesh has no such tiling: its outer Voronoi cells
would reach round the globe, so it is refused unless the file gives the cell areas.
"""

from __future__ import annotations

import numpy as np
import xarray as xr

from ..errors import InputError
from .description import GridDescription, attr
from .regular import LAT_UNITS, LON_UNITS, unit_key
from .spherical import EARTH_RADIUS, to_xyz, wrap_lon

__all__ = ["KNOWN_NAMES", "VORONOI", "find", "canonical", "voronoi_areas", "voronoi_edges"]

#: (latitude name, longitude name) -> the angle units these models document for them.
KNOWN_NAMES: dict[tuple[str, str], str] = {
    ("latCell", "lonCell"): "radians",
    ("clat", "clon"): "radians",
    ("lat_cell", "lon_cell"): "degrees",
    ("grid_center_lat", "grid_center_lon"): "degrees",
}
_RADIANS = {"radian", "radians", "rad"}
# A Voronoi cell larger than this many times the median means the points do not cover the sphere.
_REGIONAL_FACTOR = 50.0
#: How cell areas were found when they are those of the Voronoi cells (the cell_area comment).
VORONOI = "spherical Voronoi cells of the centres"


def _angle_units(var: xr.Variable, axis: str) -> str | None:
    key = unit_key(attr(var, "units"))
    if key in _RADIANS:
        return "radians"
    if key in (LAT_UNITS if axis == "lat" else LON_UNITS) or key in ("degrees", "degree"):
        return "degrees"
    return None


def _is(var: xr.Variable, axis: str) -> bool:
    """Latitude/longitude by standard_name or by units (radians need the standard_name to tell which)."""
    wanted = "latitude" if axis == "lat" else "longitude"
    return attr(var, "standard_name") == wanted or unit_key(attr(var, "units")) in (LAT_UNITS if axis == "lat" else LON_UNITS)


def _candidates(ds: xr.Dataset) -> list[tuple[str, str, str]]:
    """(lat, lon, how) pairs to try, best first."""
    out: list[tuple[str, str, str]] = []
    for name, var in ds.variables.items():
        if attr(var, "cf_role") == "mesh_topology":
            coords = (attr(var, "face_coordinates") or "").split()
            lat = [c for c in coords if c in ds.variables and _is(ds.variables[c], "lat")]
            lon = [c for c in coords if c in ds.variables and _is(ds.variables[c], "lon")]
            if lat and lon:
                out.append((lat[0], lon[0], f"UGRID mesh '{name}' face coordinates"))
    one_d = [str(n) for n, v in ds.variables.items() if v.ndim == 1 and v.dims[0] != n]
    lats = [n for n in one_d if _is(ds.variables[n], "lat")]
    lons = [n for n in one_d if _is(ds.variables[n], "lon")]
    out += [(a, b, "1-D latitude/longitude per cell (CF attributes)") for a in lats for b in lons]
    out += [(a, b, "cell-centre names") for (a, b) in KNOWN_NAMES if a in ds.variables and b in ds.variables]
    return out


def find(ds: xr.Dataset) -> GridDescription | None:
    """A mesh (cell centres on one shared dimension), or None; refuses angles of unknown units."""
    for lat, lon, how in _candidates(ds):
        vlat, vlon = ds.variables[lat], ds.variables[lon]
        if vlat.ndim != 1 or vlat.dims != vlon.dims or vlat.dims[0] == lat:
            continue
        dim = str(vlat.dims[0])
        units = _angle_units(vlat, "lat") or _angle_units(vlon, "lon")
        notes: tuple[str, ...] = ()
        if units is None:
            documented = KNOWN_NAMES.get((lat, lon))
            la, lo = np.asarray(vlat.values, dtype="float64"), np.asarray(vlon.values, dtype="float64")
            fits_radians = np.nanmax(np.abs(la)) <= np.pi / 2 + 1e-9 and np.nanmax(lo) - np.nanmin(lo) <= 2 * np.pi + 1e-9
            if documented == "radians" and fits_radians:
                units = "radians"
                notes = (f"'{lat}'/'{lon}' have no units attribute; radians assumed (the convention for these names, and the values fit)",)
            else:
                raise InputError(
                    f"cell latitude '{lat}' and longitude '{lon}' have no units, so degrees and radians cannot be told apart",
                    file=ds.encoding.get("source"),
                    remedy="add units = 'degrees_north'/'degrees_east' or 'radians' to both",
                )
        return GridDescription(
            kind="unstructured",
            dims=(dim,),
            shape=(int(ds.sizes[dim]),),
            lat=lat,
            lon=lon,
            how=f"mesh of {int(ds.sizes[dim])} cells on '{dim}': {how}, in {units}",
            angle_units=units,
            notes=notes,
        )
    return None


def voronoi_areas(lon: np.ndarray, lat: np.ndarray, *, radius: float = EARTH_RADIUS) -> np.ndarray:
    """Areas (m²) of the spherical Voronoi cells of points given in degrees.

    Notes
    -----
    scipy.spatial.SphericalVoronoi; the areas sum to 4πR² to rounding.  Identical points
    have no Voronoi cell: the caller refuses them first.
    """
    from scipy.spatial import SphericalVoronoi

    sv = SphericalVoronoi(to_xyz(lon, lat), radius=1.0)
    return sv.calculate_areas() * radius**2


def voronoi_edges(lon: np.ndarray, lat: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """The edges of the spherical Voronoi cells of points (degrees), in order round each cell.

    Returns unit vectors ``a``, ``b`` ``(edges, 3)`` (each edge runs from a to b) and the
    cell of each edge; cells are counter-clockwise (scipy's ``sort_vertices_of_regions``).
    """
    from scipy.spatial import SphericalVoronoi

    sv = SphericalVoronoi(to_xyz(lon, lat), radius=1.0)
    sv.sort_vertices_of_regions()
    sizes = np.array([len(r) for r in sv.regions])
    first = np.concatenate([[0], np.cumsum(sizes)[:-1]])
    start = np.fromiter((v for r in sv.regions for v in r), dtype=np.intp, count=int(sizes.sum()))
    last = first + sizes - 1
    nxt = np.empty_like(start)
    nxt[:-1] = start[1:]
    nxt[last] = start[first]  # each cell's last edge closes it
    cell = np.repeat(np.arange(sizes.size), sizes)
    return sv.vertices[start], sv.vertices[nxt], cell


def canonical(out: xr.Dataset, raw: xr.Dataset, desc: GridDescription) -> xr.Dataset:
    """Centres in degrees and cell areas for ``out`` (already on dim ``cell``)."""
    lat = np.asarray(raw[desc.lat].values, dtype="float64")
    lon = np.asarray(raw[desc.lon].values, dtype="float64")
    if desc.angle_units == "radians":
        lat, lon = np.rad2deg(lat), np.rad2deg(lon)
    lon = wrap_lon(lon)
    where = raw.encoding.get("source")
    xyz = np.round(to_xyz(lon, lat), 12)
    if np.unique(xyz, axis=0).shape[0] < lat.size:
        raise InputError(f"two or more mesh cells share one centre ('{desc.lat}', '{desc.lon}')", file=where, remedy="give each cell its own centre")
    if "cell_area" in out.coords:
        area = np.asarray(out["cell_area"].values, dtype="float64")
        how = "cell_measures"
    else:
        area = voronoi_areas(lon, lat)
        if area.max() > _REGIONAL_FACTOR * np.median(area):
            raise InputError(
                f"the mesh of {lat.size} cells does not cover the globe, so its cell areas cannot be derived from the centres",
                file=where,
                remedy="give the cell areas in the file (a variable named by cell_measures = 'area: NAME', in m2)",
            )
        how = VORONOI
    return out.assign_coords(
        lat=("cell", lat, {"standard_name": "latitude", "units": "degrees_north"}),
        lon=("cell", lon, {"standard_name": "longitude", "units": "degrees_east"}),
        cell_area=("cell", area, {"units": "m2", "standard_name": "cell_area", "comment": f"from {how}"}),
    )
