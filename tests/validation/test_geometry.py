"""Sphere geometry: cell areas, region fractions and the bundled land fraction.

Each expected value comes from outside the project: the area of a sphere and of a
spherical zone (Archimedes' hat-box theorem), numerical integration with scipy, and the
share of Earth's surface that is land (common practice).
"""

from __future__ import annotations

import numpy as np
import pytest
import xarray as xr
from scipy import integrate

from evaluation.grid import cell_area, infer_bounds
from evaluation.io import open_source
from evaluation.regions import bundled_land_fraction, region_weights

# IUGG mean radius of the Earth, rounded to the metre as the trade uses it (value from
# memory: Moritz 2000, Geodetic Reference System 1980, gives R1 = 6 371 008.8 m).
R = 6_371_000.0
SPHERE = 4.0 * np.pi * R**2  # area of a sphere (Archimedes)


def _edges(step: float, start: float, stop: float) -> np.ndarray:
    e = np.linspace(start, stop, int(round((stop - start) / step)) + 1)
    return np.stack([e[:-1], e[1:]], axis=1)


@pytest.mark.parametrize(("dlat", "dlon"), [(1.0, 1.0), (2.5, 3.75), (0.25, 0.25), (4.0, 5.0), (180.0, 360.0)])
def test_exact_cell_areas_sum_to_the_sphere(dlat, dlon):
    # Source: area of a sphere 4 pi R^2 with R = 6 371 000 m (IUGG mean radius); rtol 1e-10.
    area = cell_area(_edges(dlat, -90, 90), _edges(dlon, -180, 180))
    np.testing.assert_allclose(float(area.sum()), SPHERE, rtol=1e-10)


def test_irregular_latitudes_sum_to_the_sphere():
    # Source: area of a sphere (Archimedes); Gauss-Legendre latitudes (numpy.polynomial)
    # give an irregular grid as used by spectral models, bounds inferred half-way; rtol 1e-10.
    nodes, _ = np.polynomial.legendre.leggauss(48)
    lat = np.rad2deg(np.arcsin(nodes))
    lon = np.arange(0.0, 360.0, 3.75)
    area = cell_area(infer_bounds(lat, kind="lat"), infer_bounds(lon, kind="lon"))
    np.testing.assert_allclose(float(area.sum()), SPHERE, rtol=1e-10)


@pytest.mark.parametrize(("south", "north", "west", "east"), [(-90, -89, 0, 1), (10, 12.5, -40, -36.25), (60, 90, 170, 180), (-1, 1, -180, 180)])
def test_single_cell_area_matches_numerical_integration(south, north, west, east):
    # Source: surface element R^2 cos(phi) dphi dlambda integrated with scipy.integrate.dblquad
    # (independent of the closed form the tool uses); rtol 1e-10.
    expected, _ = integrate.dblquad(
        lambda phi, lam: R**2 * np.cos(phi),
        np.deg2rad(west), np.deg2rad(east),
        np.deg2rad(south), np.deg2rad(north),
        epsabs=0.0, epsrel=1e-13,
    )
    got = cell_area(np.array([[south, north]]), np.array([[west, east]]))
    np.testing.assert_allclose(float(got.values[0, 0]), expected, rtol=1e-10)


@pytest.mark.parametrize("with_bounds", [True, False])
def test_cell_areas_of_a_file_sum_to_the_sphere(nc_file, grid_factory, times_factory, with_bounds):
    # Source: area of a sphere 4 pi R^2 (IUGG mean radius); the file is read like a user's,
    # with its bounds or with bounds inferred half-way between centres; longitudes 0..360; rtol 1e-10.
    grid = grid_factory(2.5, 2.5, lon0=0.0)
    data = np.ones((12, grid["lat"].size, grid["lon"].size), dtype="float32")
    path = nc_file("tas.nc", {"tas": (data, {"units": "K", "standard_name": "air_temperature"})},
                   grid=grid, times=times_factory(2000, 2000, "standard"), bounds=with_bounds)
    ds = open_source(str(path))
    np.testing.assert_allclose(float(ds["cell_area"].sum()), SPHERE, rtol=1e-10)
    assert ds["lon"].values.min() >= -180.0 and ds["lon"].values.max() < 180.0


@pytest.mark.parametrize(("region", "fraction"), [("global", 1.0), ("tropics", 0.5), ("nh-extratropics", 0.25), ("arctic", (1 - np.sin(np.pi / 3)) / 2)])
def test_latitude_band_fractions_are_spherical_zones(region, fraction):
    # Source: Archimedes' hat-box theorem, a zone between phi1 and phi2 covers
    # (sin phi2 - sin phi1) / 2 of the sphere; on a grid whose rows straddle the band
    # edges, so that cells count in part; rtol 1e-12.
    lat_b = _edges(180.0 / 26, -90, 90)  # rows of 6.92 deg: no band edge falls on a row edge
    lon_b = _edges(5.0, -180, 180)
    grid = xr.Dataset(coords={"lat": lat_b.mean(1), "lon": lon_b.mean(1),
                              "lat_bnds": (("lat", "nv"), lat_b), "lon_bnds": (("lon", "nv"), lon_b)})
    area = cell_area(lat_b, lon_b).values
    w = region_weights(region, grid).values
    np.testing.assert_allclose(float((w * area).sum()) / SPHERE, fraction, rtol=1e-12)


@pytest.mark.parametrize("box", ["box:-20,20,152,-163", "box:-20,20,152,197", "box:5,35,-17.5,42.5"])
def test_box_area_including_the_dateline(box):
    # Source: area of a spherical rectangle R^2 (sin N - sin S)(E - W) in radians (common
    # practice), on a 2.5 x 3.75 deg grid whose cells the box edges cut; the first two
    # boxes cross the dateline and are the same box written two ways; rtol 1e-12.
    s, n, w, e = (float(v) for v in box.split(":")[1].split(","))
    width = (e - w) % 360.0
    expected = R**2 * (np.sin(np.deg2rad(n)) - np.sin(np.deg2rad(s))) * np.deg2rad(width)
    lat_b, lon_b = _edges(2.5, -90, 90), _edges(3.75, -180, 180)
    grid = xr.Dataset(coords={"lat": lat_b.mean(1), "lon": lon_b.mean(1),
                              "lat_bnds": (("lat", "nv"), lat_b), "lon_bnds": (("lon", "nv"), lon_b)})
    frac = region_weights(box, grid).values
    got = float((frac * cell_area(lat_b, lon_b).values).sum())
    np.testing.assert_allclose(got, expected, rtol=1e-12)


def test_bundled_land_fraction_is_29_percent_of_the_globe():
    # Source: common practice, about 29 % of Earth's surface is land; tolerance +-0.01.
    # The area weights are written here from the bounds (R^2 dsin(phi) dlambda), not taken
    # from the file's cell_area.
    lf = bundled_land_fraction()
    lat_b, lon_b = lf["lat_bnds"].values, lf["lon_bnds"].values
    w = np.diff(np.sin(np.deg2rad(lat_b)), axis=1)[:, 0][:, None] * np.deg2rad(np.diff(lon_b, axis=1)[:, 0])[None, :]
    np.testing.assert_allclose(w.sum() * R**2, SPHERE, rtol=1e-10)  # the grid tiles the sphere
    share = float((lf["sftlf"].values.astype("float64") * w).sum() / w.sum())
    assert share == pytest.approx(0.29, abs=0.01)


@pytest.mark.parametrize(("dlat", "dlon"), [(2.0, 2.0), (2.5, 3.75), (4.0, 5.0)])
def test_land_and_ocean_regions_on_other_grids(dlat, dlon):
    # Source: common practice, land is about 29 % of Earth's surface (+-0.01), and
    # land + ocean is the whole cell (a partition; exact to 1e-12).
    lat_b, lon_b = _edges(dlat, -90, 90), _edges(dlon, -180, 180)
    grid = xr.Dataset(coords={"lat": lat_b.mean(1), "lon": lon_b.mean(1),
                              "lat_bnds": (("lat", "nv"), lat_b), "lon_bnds": (("lon", "nv"), lon_b)})
    area = cell_area(lat_b, lon_b).values
    land = region_weights("land", grid).values
    ocean = region_weights("ocean", grid).values
    assert float((land * area).sum() / area.sum()) == pytest.approx(0.29, abs=0.01)
    np.testing.assert_allclose(land + ocean, 1.0, atol=1e-12)
    assert land.min() >= 0.0 and land.max() <= 1.0
