"""Conservative weights from cells with known corners (rotated and curvilinear grids).

No well-kept library on PyPI does first-order conservative remapping between spherical
polygons here: xESMF needs ESMF from conda (esmpy is not on PyPI), uxarray's
conservative remap needs the YAC backend (not on PyPI), pyresample and xarray-regrid
have none for curvilinear sources.  So it is written here, exactly, with shapely doing
the polygon clipping:

* Each source cell's boundary is sampled densely along its true edges (rotated
  meridians and parallels for a rotated grid, great circles between corners for a
  curvilinear one), densest where an edge spans many degrees of longitude (near a pole).
* Points are mapped to the Lambert cylindrical equal-area plane ``(λ, sin φ)``.  That
  map preserves area exactly, and a regular target cell is an exact rectangle in it, so
  ``R² · area(source polygon ∩ target rectangle)`` is the exact spherical area of the
  overlap of the *sampled* source cell with the target cell.
* The only approximation is the sampling of the source edges between the sample points;
  the sampled cell areas agree with the exact ones (rotated: ``R²Δsin φ'Δλ'``;
  curvilinear: the great-circle polygon) to about 1e-5 — tests measure it.

Weights are the overlap areas; the sums over target cells equal the (sampled) source
cell areas, so the area-weighted global mean is conserved to rounding when the source
covers the globe.  Cells crossing the dateline are unwrapped, cells holding a pole are
closed along the pole's line ``sin φ = ±1``.
"""

from __future__ import annotations

import numpy as np
import scipy.sparse as sp
import shapely
import xarray as xr

from .remap import EDGE_POINTS
from .remap_sparse import apply_matrix, cached
from .spherical import EARTH_RADIUS, great_circle_points, to_lonlat, to_xyz, wrap_lon

__all__ = ["EDGE_POINTS", "MAX_STEP", "cell_polygons", "edge_polygons", "overlap_matrix", "conservative", "covered_area", "mesh_conservative"]

# EDGE_POINTS: sample points per cell edge, at least; more where an edge spans many degrees of
# longitude (defined beside the sentence the provenance shows, in remap.py)
#: Longest step in longitude (degrees) between two sample points of an edge: the straight
#: chord in (λ, sin φ) between them then misses the true edge by about 1e-6 of a cell's
#: area (measured in the tests); near the poles an edge spans many degrees of longitude.
MAX_STEP = 0.2


def _corners(grid: xr.Dataset, kind: str) -> np.ndarray:
    """Corners ``(cells, 4, d)``: (rotated lon, rotated lat) for a rotated grid, unit vectors otherwise."""
    if kind == "rotated":
        yb, xb = grid["y_bnds"].values, grid["x_bnds"].values
        ny, nx = yb.shape[0], xb.shape[0]
        rlat = np.stack([yb[:, 0], yb[:, 0], yb[:, 1], yb[:, 1]], axis=-1)[:, None, :].repeat(nx, axis=1)
        rlon = np.stack([xb[:, 0], xb[:, 1], xb[:, 1], xb[:, 0]], axis=-1)[None, :, :].repeat(ny, axis=0)
        return np.stack([rlon, rlat], axis=-1).reshape(-1, 4, 2)
    return to_xyz(grid["lon_bnds"].values, grid["lat_bnds"].values).reshape(-1, 4, 3)


def _sample(a: np.ndarray, b: np.ndarray, kind: str, mapping: tuple, n: int) -> tuple[np.ndarray, np.ndarray]:
    """``n`` points (``b`` excluded) along edges from corners ``a`` to ``b`` ``(m, d)`` -> lon, lat ``(m, n)``.

    The points of an edge walked from b to a are the same (but the first), so a shared
    edge is sampled identically from both of its cells and the cells tile the plane.
    """
    if kind == "rotated":
        from .rotated import rotated_to_true

        t = (np.arange(n) / n)[None, :, None]
        pts = a[:, None, :] + (b - a)[:, None, :] * t
        return rotated_to_true(pts[..., 0], pts[..., 1], mapping)
    return to_lonlat(great_circle_points(a, b, n))


def cell_polygons(grid: xr.Dataset, kind: str) -> np.ndarray:
    """Each cell as a shapely polygon in the equal-area plane (see :func:`_planar`).

    Every edge gets :data:`EDGE_POINTS` points, or a power of two times more so that no
    step exceeds :data:`MAX_STEP` degrees of longitude.  The count depends on the edge
    alone, so both cells sharing an edge see the same points.
    """
    corners = _corners(grid, kind)
    ncell = corners.shape[0]
    mapping = tuple(grid["crs"].attrs.items()) if "crs" in grid.coords else ()
    a = corners.reshape(ncell * 4, -1)
    b = np.roll(corners, -1, axis=1).reshape(ncell * 4, -1)
    return edge_polygons(a, b, np.repeat(np.arange(ncell), 4), ncell, kind=kind, mapping=mapping)


def edge_polygons(a: np.ndarray, b: np.ndarray, cell: np.ndarray, ncell: int, *, kind: str, mapping: tuple = (), min_points: int = EDGE_POINTS) -> np.ndarray:
    """Polygons of cells given as their edges in order: edge ``k`` of cell ``cell[k]`` runs
    from corner ``a[k]`` to ``b[k]`` (rotated lon/lat for ``rotated``, unit vectors otherwise)."""
    lon, lat = _sample(a, b, kind, mapping, min_points)
    end, end_lat = _sample(b, b, kind, mapping, 1)
    lon, lat = np.concatenate([lon, end], axis=1), np.concatenate([lat, end_lat], axis=1)
    lon = _pole_longitudes(lon.ravel(), lat.ravel(), np.repeat(np.arange(lon.shape[0]), lon.shape[1])).reshape(lon.shape)
    span = np.abs(wrap_lon(np.diff(lon, axis=1))).sum(axis=1)
    count = min_points * 2 ** np.ceil(np.log2(np.maximum(span / MAX_STEP / min_points, 1.0))).astype(int)
    offset = np.concatenate([[0], np.cumsum(count)])
    flat_lon, flat_lat = np.empty(offset[-1]), np.empty(offset[-1])
    for n in np.unique(count):
        edges = np.flatnonzero(count == n)
        e_lon, e_lat = _sample(a[edges], b[edges], kind, mapping, int(n))
        where = offset[edges][:, None] + np.arange(n)[None, :]
        flat_lon[where], flat_lat[where] = e_lon, e_lat
    ring = np.repeat(cell, count)
    # a point on a pole is doubled: the ring arrives at the pole's line at one longitude and leaves at another
    on_pole = np.flatnonzero(np.abs(flat_lat) > 90.0 - 1e-9)
    flat_lon, flat_lat, ring = (np.insert(x, on_pole + 1, x[on_pole]) for x in (flat_lon, flat_lat, ring))
    return _planar(flat_lon, flat_lat, ring, ncell)


def _ring_ends(ring: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    first = np.concatenate([[0], np.flatnonzero(np.diff(ring)) + 1])
    return first, np.concatenate([first[1:], [ring.size]]) - 1


def _pole_longitudes(lon: np.ndarray, lat: np.ndarray, ring: np.ndarray) -> np.ndarray:
    """Longitudes for points on a pole, which have none of their own.

    In (λ, sin φ) a ring meets a pole's line where it arrives and leaves it where it
    departs: each pole point takes the longitude of the last point before it (going
    round the ring) that is off the pole, and the last pole point of a run of two or
    more takes that of the next point off the pole, so the run follows the pole's line.
    """
    at_pole = np.abs(lat) > 90.0 - 1e-9
    if not at_pole.any():
        return lon
    lon = lon.copy()
    first, last = _ring_ends(ring)
    def neighbour(i: int, back: bool) -> int | None:
        r, k = ring[i], i
        for _ in range(last[r] - first[r] + 1):
            if back:
                k = k - 1 if k > first[r] else last[r]
            else:
                k = k + 1 if k < last[r] else first[r]
            if not at_pole[k]:
                return k
        return None

    original = lon.copy()
    for i in np.flatnonzero(at_pole):  # few points: the poles
        before, after = neighbour(int(i), True), neighbour(int(i), False)
        prev = first[ring[i]] if i == last[ring[i]] else i + 1
        nxt_on_pole = at_pole[prev]
        back_on_pole = at_pole[i - 1 if i > first[ring[i]] else last[ring[i]]]
        if not nxt_on_pole and back_on_pole and after is not None:
            lon[i] = original[after]  # the end of a run: where the ring leaves the pole
        elif before is not None:
            lon[i] = original[before]
    return lon


def _orientation(lon: np.ndarray, lat: np.ndarray, first: np.ndarray) -> np.ndarray:
    """+1 for rings counter-clockwise seen from outside the sphere, -1 for clockwise."""
    v = to_xyz(lon, lat)
    nxt = np.roll(v, -1, axis=0)
    last = np.concatenate([first[1:], [lon.size]]) - 1
    nxt[last] = v[first]
    normal = np.add.reduceat(np.cross(v, nxt), first, axis=0)
    centre = np.add.reduceat(v, first, axis=0)
    return np.sign(np.einsum("ij,ij->i", normal, centre))


def _planar(lon: np.ndarray, lat: np.ndarray, ring: np.ndarray, nring: int) -> np.ndarray:
    """Shapely polygons in (λ, sin φ) of rings given as flat points with their ring number.

    Longitudes are unwrapped along each ring (a ring crossing the dateline stays in one
    piece) and the ring is moved so that its west edge lies in [-180, 180).  A ring that
    goes once round a pole is closed along that pole's line sin φ = ±1.  Where a ring
    passes through a pole, the step in longitude there runs along the pole's line on the
    side that keeps the cell on the ring's inner side (left for counter-clockwise rings),
    which a shortest step cannot tell when the cell meets the pole over 180°.
    """
    first, last = _ring_ends(ring)
    sense = _orientation(lon, lat, first)
    lon = _pole_longitudes(lon, lat, ring)
    step = wrap_lon(np.diff(lon, prepend=lon[0]))
    step[first] = 0.0
    closing = wrap_lon(lon[first] - lon[last])
    # A step of more than 90° of longitude between neighbouring sample points happens only
    # where the ring passes through (or within a hair of) a pole; its direction is the one
    # that keeps the cell on the ring's inner side: a counter-clockwise ring passes a north
    # pole westward and a south pole eastward, a clockwise ring the other way round.
    north = (lat > 0)
    for where, values, index in ((np.flatnonzero(np.abs(step) > 90.0), step, None), (np.flatnonzero(np.abs(closing) > 90.0), closing, first)):
        for k in where:
            r = ring[k] if index is None else k
            here = k if index is None else first[r]
            eastward = (sense[r] > 0) != bool(north[here])
            d = values[k]
            values[k] = d % 360.0 if eastward else -((-d) % 360.0)
    cum = np.cumsum(step)
    lon_u = lon[first][ring] + cum - cum[first][ring]
    winding = lon_u[last] + closing - lon_u[first]
    west = np.minimum.reduceat(lon_u, first)
    lon_u = lon_u - (360.0 * np.floor((west + 180.0) / 360.0))[ring]
    mu = np.sin(np.deg2rad(lat))
    polar = np.abs(winding) > 180.0
    plain = ~polar[ring]
    out = np.empty(nring, dtype=object)
    rings = shapely.linearrings(np.stack([lon_u[plain], mu[plain]], axis=-1), indices=np.unique(ring[plain], return_inverse=True)[1])
    out[~polar] = shapely.polygons(rings)
    # a thin cell at a rotated pole can come out self-touching after sampling: repair it
    broken = np.flatnonzero(~polar)[~shapely.is_valid(out[~polar])]
    out[broken] = shapely.make_valid(out[broken])
    for i in np.flatnonzero(polar):
        x, y = lon_u[ring == i], mu[ring == i]
        pole = 1.0 if lat[ring == i].mean() > 0 else -1.0
        end = x[0] + winding[i]
        poly = shapely.Polygon(np.concatenate([np.stack([x, y], axis=-1), [[end, y[0]], [end, pole], [x[0], pole]]]))
        out[i] = poly if poly.is_valid else shapely.make_valid(poly)
    return out


def overlap_matrix(polys: np.ndarray, tgt_lat_b: np.ndarray, tgt_lon_b: np.ndarray) -> sp.csr_matrix:
    """Overlap areas (m²) of source cells (polygons of :func:`cell_polygons`) with regular target cells.

    Returns a sparse matrix ``(nlat·nlon, cells)``; target cells in row-major (lat, lon) order.
    """
    nlat, nlon = tgt_lat_b.shape[0], tgt_lon_b.shape[0]
    mu_b = np.sin(np.deg2rad(np.sort(tgt_lat_b, axis=1)))
    lon_b = np.sort(tgt_lon_b, axis=1)
    j, i = np.meshgrid(np.arange(nlat), np.arange(nlon), indexing="ij")
    boxes = shapely.box(lon_b[i, 0].ravel(), mu_b[j, 0].ravel(), lon_b[i, 1].ravel(), mu_b[j, 1].ravel())
    tree = shapely.STRtree(boxes)
    rows, cols, vals = [], [], []
    # a cell reaching past the east edge of the target's longitudes also meets it one turn west
    for offset in (0.0, -360.0, 360.0):
        moved = polys if offset == 0.0 else shapely.transform(polys, lambda c, o=offset: c + np.array([o, 0.0]))
        src, tgt = tree.query(moved)  # bounding boxes meet; the clipping below decides
        if src.size == 0:
            continue
        # clipping by a rectangle is several times faster than a general intersection
        # (measured 7x); one call per target cell clips all its candidate source cells
        order = np.argsort(tgt, kind="stable")
        src, tgt = src[order], tgt[order]
        starts = np.flatnonzero(np.diff(tgt, prepend=-1))
        ends = np.append(starts[1:], tgt.size)
        area = np.empty(tgt.size)
        for a, b in zip(starts, ends, strict=True):
            k = tgt[a]
            jl, il = divmod(int(k), nlon)
            rect = (lon_b[il, 0], mu_b[jl, 0], lon_b[il, 1], mu_b[jl, 1])
            try:
                area[a:b] = shapely.area(shapely.clip_by_rect(moved[src[a:b]], *rect))
            except shapely.errors.GEOSException:  # GEOS's fast clipper fails on a few degenerate rings
                area[a:b] = shapely.area(shapely.intersection(moved[src[a:b]], shapely.box(*rect)))
        keep = area > 0
        rows.append(tgt[keep])
        cols.append(src[keep])
        vals.append(area[keep])
    scale = EARTH_RADIUS**2 * np.deg2rad(1.0)  # plane area is degrees × sin φ
    r = np.concatenate(rows) if rows else np.zeros(0, int)
    c = np.concatenate(cols) if cols else np.zeros(0, int)
    v = np.concatenate(vals) * scale if vals else np.zeros(0)
    return sp.csr_matrix((v, (r, c)), shape=(nlat * nlon, polys.shape[0]))


def _cell_overlaps(source_grid: xr.Dataset, target: xr.Dataset, kind: str) -> sp.csr_matrix:
    tgt_lat_b, tgt_lon_b = target["lat_bnds"].values, target["lon_bnds"].values

    def build() -> sp.csr_matrix:
        return overlap_matrix(cell_polygons(source_grid, kind), tgt_lat_b, tgt_lon_b)

    return cached((kind, source_grid["lat_bnds"].values, source_grid["lon_bnds"].values, tgt_lat_b, tgt_lon_b), build)


def conservative(da: xr.DataArray, source_grid: xr.Dataset, target: xr.Dataset, *, kind: str) -> xr.DataArray:
    """First-order conservative map (Jones 1999) from a rotated or curvilinear grid onto a regular one."""
    return apply_matrix(da, _cell_overlaps(source_grid, target, kind), ("y", "x"), target)


def covered_area(source_grid: xr.Dataset, target: xr.Dataset, *, kind: str) -> np.ndarray:
    """``(lat, lon)`` area (m²) of each regular target cell that the cells of a rotated or
    curvilinear grid cover: the row sums of the overlap matrix (the same matrix, cached,
    that :func:`conservative` applies)."""
    covered = np.asarray(_cell_overlaps(source_grid, target, kind).sum(axis=1)).ravel()
    return covered.reshape(target.sizes["lat"], target.sizes["lon"])


def mesh_conservative(da: xr.DataArray, source_grid: xr.Dataset, target: xr.Dataset) -> xr.DataArray:
    """Conservative map from a mesh: exact overlaps of its Voronoi cells when its areas are
    those cells' (global meshes), else the area-weighted mean of the cells centred in each
    target cell (:func:`evaluation.grids.remap_points.binned`)."""
    from .remap_points import binned
    from .unstructured import VORONOI, voronoi_edges

    if VORONOI not in str(source_grid["cell_area"].attrs.get("comment", "")):
        return binned(da, source_grid, target)
    tgt_lat_b, tgt_lon_b = target["lat_bnds"].values, target["lon_bnds"].values
    lon, lat = source_grid["lon"].values, source_grid["lat"].values

    def build() -> sp.csr_matrix:
        a, b, cell = voronoi_edges(lon, lat)
        # mesh edges are short: two points each suffice away from the poles (MAX_STEP adds more there)
        polys = edge_polygons(a, b, cell, lon.size, kind="unstructured", min_points=2)
        return overlap_matrix(polys, tgt_lat_b, tgt_lon_b)

    weights = cached(("voronoi", lon, lat, tgt_lat_b, tgt_lon_b), build)
    return apply_matrix(da, weights, ("cell",), target)
