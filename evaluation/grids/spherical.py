"""Geometry on the sphere shared by every grid kind: unit vectors, great-circle polygons.

Everything here works on plain numpy arrays in degrees (input) and returns plain arrays.
"""

from __future__ import annotations

import numpy as np

__all__ = [
    "EARTH_RADIUS",
    "to_xyz",
    "to_lonlat",
    "wrap_lon",
    "polygon_area",
    "great_circle_points",
    "corners_from_centres",
]

EARTH_RADIUS = 6_371_000.0  # m, IUGG mean radius of the Earth


def wrap_lon(lon: np.ndarray | float) -> np.ndarray:
    """Longitude in [-180, 180)."""
    return ((np.asarray(lon, dtype="float64") + 180.0) % 360.0) - 180.0


def to_xyz(lon: np.ndarray, lat: np.ndarray) -> np.ndarray:
    """Unit vectors ``(..., 3)`` of points given in degrees."""
    lam, phi = np.deg2rad(np.asarray(lon, dtype="float64")), np.deg2rad(np.asarray(lat, dtype="float64"))
    return np.stack([np.cos(phi) * np.cos(lam), np.cos(phi) * np.sin(lam), np.sin(phi)], axis=-1)


def to_lonlat(xyz: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Longitude in [-180, 180) and latitude (degrees) of vectors ``(..., 3)`` (any length)."""
    x, y, z = xyz[..., 0], xyz[..., 1], xyz[..., 2]
    lat = np.rad2deg(np.arctan2(z, np.hypot(x, y)))
    lon = wrap_lon(np.rad2deg(np.arctan2(y, x)))
    return lon, lat


def polygon_area(lon: np.ndarray, lat: np.ndarray, *, radius: float = EARTH_RADIUS) -> np.ndarray:
    """Area of spherical polygons whose edges are great-circle arcs.

    Parameters
    ----------
    lon, lat
        Vertices in degrees, shape ``(..., nv)``, in order (either sense) round each polygon.

    Notes
    -----
    The polygon is cut into a fan of triangles from its first vertex; each triangle's solid
    angle is ``2 atan2(a·(b×c), 1 + a·b + b·c + c·a)`` (Van Oosterom & Strackee 1983), signed,
    so the sum is right for any simple polygon smaller than a hemisphere.  A NaN vertex
    gives a NaN area.  Repeated vertices (degenerate edges) add nothing.
    """
    v = to_xyz(lon, lat)
    a = v[..., :1, :]
    b, c = v[..., 1:-1, :], v[..., 2:, :]
    triple = np.einsum("...i,...i->...", a, np.cross(b, c))
    denom = 1.0 + np.einsum("...i,...i->...", a, b) + np.einsum("...i,...i->...", b, c) + np.einsum("...i,...i->...", c, a)
    omega = 2.0 * np.arctan2(triple, denom).sum(axis=-1)
    return np.abs(omega) * radius**2


def great_circle_points(a: np.ndarray, b: np.ndarray, n: int) -> np.ndarray:
    """``n`` points from ``a`` towards ``b`` (``b`` excluded) along the shorter great circle.

    ``a``, ``b``: unit vectors ``(..., 3)``; result ``(..., n, 3)``.  Spherical linear
    interpolation; identical end points give ``n`` copies.
    """
    t = np.arange(n, dtype="float64") / n
    cos = np.clip(np.einsum("...i,...i->...", a, b), -1.0, 1.0)
    theta = np.arccos(cos)[..., None]
    sin = np.sin(theta)
    small = sin < 1e-12
    with np.errstate(invalid="ignore", divide="ignore"):
        wa = np.where(small, 1.0 - t, np.sin((1.0 - t) * theta) / sin)
        wb = np.where(small, t, np.sin(t * theta) / sin)
    out = wa[..., None] * a[..., None, :] + wb[..., None] * b[..., None, :]
    return out / np.linalg.norm(out, axis=-1, keepdims=True)


def corners_from_centres(lon: np.ndarray, lat: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Cell vertices ``(ny, nx, 4)`` of a logically rectangular grid inferred from its centres.

    Each interior corner is the normalised mean of the unit vectors of the four centres
    around it; the outer row/column of centres is extrapolated linearly (in 3-D) by one
    cell first.  Vertices go round each cell counter-clockwise in index space:
    (j, i), (j, i+1), (j+1, i+1), (j+1, i) — the CF order for ``bounds`` of 2-D coordinates.

    Notes
    -----
    A grid of fewer than two cells along an axis has no spacing to infer from: the
    caller must refuse it.  NaN centres give NaN corners around them.
    """
    v = to_xyz(lon, lat)
    ny, nx = v.shape[:2]
    pad = np.empty((ny + 2, nx + 2, 3))
    pad[1:-1, 1:-1] = v
    pad[0, 1:-1] = 2 * v[0] - v[1]
    pad[-1, 1:-1] = 2 * v[-1] - v[-2]
    pad[:, 0] = 2 * pad[:, 1] - pad[:, 2]
    pad[:, -1] = 2 * pad[:, -2] - pad[:, -3]
    c = pad[:-1, :-1] + pad[1:, :-1] + pad[:-1, 1:] + pad[1:, 1:]
    c /= np.linalg.norm(c, axis=-1, keepdims=True)
    clon, clat = to_lonlat(c)  # (ny+1, nx+1)
    order = ((0, 0), (0, 1), (1, 1), (1, 0))
    lon_v = np.stack([clon[dj : dj + ny, di : di + nx] for dj, di in order], axis=-1)
    lat_v = np.stack([clat[dj : dj + ny, di : di + nx] for dj, di in order], axis=-1)
    return lon_v, lat_v
