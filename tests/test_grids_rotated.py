"""Rotated-pole grids: found by the CF grid mapping, true positions checked against pyproj,
cell areas against the exact rotated-sphere formula, conservative remapping conserves."""

from __future__ import annotations

import numpy as np
import pytest
import shapely
import xarray as xr
from cfdata import EARTH_RADIUS_M
from gridfiles import true_positions, write_rotated

from evaluation import grids, io
from evaluation.errors import InputError
from evaluation.grids import remap_polygons
from evaluation.grids.rotated import rotated_to_true, true_to_rotated
from evaluation.grids.target import regular_grid
from evaluation.regions import region_weights

SPHERE = 4 * np.pi * EARTH_RADIUS_M**2  # surface of a sphere (textbook)


@pytest.mark.parametrize(("pole_lat", "pole_lon", "npgl"), [(39.25, -162.0, 0.0), (40.0, -160.0, 0.0), (-25.0, 70.0, 10.0), (90.0, 180.0, 0.0), (6.55, -170.0, -35.0)])
def test_rotation_matches_pyproj(pole_lat, pole_lon, npgl):
    rng = np.random.default_rng(1)
    rlon, rlat = rng.uniform(-180, 180, 500), rng.uniform(-89.9, 89.9, 500)
    mapping = (("grid_north_pole_latitude", str(pole_lat)), ("grid_north_pole_longitude", str(pole_lon)), ("north_pole_grid_longitude", str(npgl)))
    lon, lat = rotated_to_true(rlon, rlat, mapping)
    # outside reference: PROJ's ob_tran through pyproj.CRS.from_cf (CF appendix F)
    ref_lon, ref_lat = true_positions(rlon, rlat, pole_lat, pole_lon, npgl)
    np.testing.assert_allclose(lat, ref_lat, atol=1e-9)
    np.testing.assert_allclose(((lon - ref_lon + 180) % 360) - 180, 0.0, atol=1e-9)
    back_lon, back_lat = true_to_rotated(lon, lat, mapping)
    np.testing.assert_allclose(back_lat, rlat, atol=1e-9)


def test_rotated_origin_lies_opposite_the_pole():
    # CF appendix F: the rotated equator/prime meridian crossing sits at 90° - pole latitude,
    # on the meridian opposite the pole (e.g. pole 39.25N 162W -> 50.75N 18E; common practice)
    lon, lat = rotated_to_true(np.array([0.0]), np.array([0.0]), (("grid_north_pole_latitude", "39.25"), ("grid_north_pole_longitude", "-162")))
    assert lat[0] == pytest.approx(50.75) and lon[0] == pytest.approx(18.0)


@pytest.fixture(scope="module")
def regional(tmp_path_factory):
    path = tmp_path_factory.mktemp("rot") / "regional.nc"
    rlat, rlon = np.arange(-10.0, 10.01, 0.5), np.arange(-15.0, 12.01, 0.5)
    write_rotated(path, rlat=rlat, rlon=rlon, pole_lat=39.25, pole_lon=-162.0, years=1, aux_latlon=False)
    return io.open_source(str(path)), rlat, rlon


def test_rotated_grid_is_described_and_normalised(regional):
    ds, rlat, rlon = regional
    assert grids.kind_of(ds) == "rotated"
    assert ds["tas"].dims == ("time", "y", "x")
    np.testing.assert_array_equal(ds["y"].values, rlat)
    rl, rp = np.meshgrid(rlon, rlat)
    ref_lon, ref_lat = true_positions(rl, rp, 39.25, -162.0)
    np.testing.assert_allclose(ds["lat"].values, ref_lat, atol=1e-9)
    np.testing.assert_allclose(ds["lon"].values, ref_lon, atol=1e-9)
    # the domain is over Europe, not in the tropics where rlat/rlon would put it
    assert 38.0 < float(ds["lat"].min()) and float(ds["lat"].max()) < 64.0


def test_rotated_cell_areas_are_exact(regional):
    ds, rlat, rlon = regional
    # a rotation preserves area: R² Δsin(rlat) Δrlon (exact on the rotated sphere)
    lo, hi = np.deg2rad(rlat - 0.25), np.deg2rad(rlat + 0.25)
    expected = EARTH_RADIUS_M**2 * (np.sin(hi) - np.sin(lo))[:, None] * np.deg2rad(0.5) * np.ones(rlon.size)[None, :]
    np.testing.assert_allclose(ds["cell_area"].values, expected, rtol=1e-12)


def test_rotated_corners_and_spherical_polygon_area_agree_with_pyproj_geod(regional):
    ds, _, _ = regional
    from pyproj import Geod

    # corners are true positions of the rotated bounds (pyproj); the great-circle polygon
    # through them has nearly the cell's area (edges along rotated parallels are small circles)
    geod = Geod(a=EARTH_RADIUS_M, b=EARTH_RADIUS_M)  # geodesics on a sphere are great circles
    lon_v, lat_v = ds["lon_bnds"].values[5, 7], ds["lat_bnds"].values[5, 7]
    area, _ = geod.polygon_area_perimeter(lon_v, lat_v)
    assert abs(area) == pytest.approx(float(ds["cell_area"].values[5, 7]), rel=1e-4)


def test_sampled_polygons_approach_the_exact_areas(regional):
    ds, _, _ = regional
    polys = remap_polygons.cell_polygons(grids.grid_of(ds), "rotated")
    area = shapely.area(polys) * EARTH_RADIUS_M**2 * np.deg2rad(1.0)
    # measured accuracy of the sampled edges (stated in remap_polygons): about 1e-6 here
    np.testing.assert_allclose(area, ds["cell_area"].values.ravel(), rtol=1e-5)


@pytest.mark.parametrize("pole_lat", [40.0, 39.25, 90.0])
def test_global_rotated_grid_tiles_the_sphere_and_conserves_the_mean(tmp_path, pole_lat):
    # pole 40: the true north pole on a cell corner; 39.25: on an edge; 90: the identity
    rlat, rlon = np.arange(-88.0, 90.0, 4.0), np.arange(-178.0, 180.0, 4.0)
    path = write_rotated(tmp_path / "g.nc", rlat=rlat, rlon=rlon, pole_lat=pole_lat, pole_lon=-160.0, years=1, aux_latlon=False)
    ds = io.open_source(str(path))
    assert float(ds["cell_area"].sum()) == pytest.approx(SPHERE, rel=1e-13)
    target = regular_grid(5.0, 5.0)
    field = ds["tas"].isel(time=0).astype("float64").load()
    out = grids.regrid(field, target, method="conservative", source_grid=grids.grid_of(ds))
    assert not np.isnan(out.values).any()
    polys = remap_polygons.cell_polygons(grids.grid_of(ds), "rotated")
    sampled = shapely.area(polys) * EARTH_RADIUS_M**2 * np.deg2rad(1.0)
    assert sampled.sum() == pytest.approx(SPHERE, rel=1e-11)  # the sampled cells tile the sphere
    # conservation (Jones 1999): the target's area-weighted mean is the source's, with the areas the weights use
    mean_src = np.sum(field.values.ravel() * sampled) / sampled.sum()
    mean_tgt = float((out * target["cell_area"]).sum() / target["cell_area"].sum())
    assert mean_tgt == pytest.approx(mean_src, rel=1e-10)
    # and with the exact areas, within the sampling accuracy
    exact = float((field * ds["cell_area"]).sum() / ds["cell_area"].sum())
    assert mean_tgt == pytest.approx(exact, rel=1e-6)


def test_region_fractions_on_a_rotated_grid(tmp_path):
    # a global rotated grid: the tropics (30S-30N) are half the sphere, sin 30° = 1/2 (textbook);
    # on the native grid the weights are centre-in-region, exact only to about a cell
    rlat, rlon = np.arange(-89.0, 90.0, 2.0), np.arange(-179.0, 180.0, 2.0)
    ds = io.open_source(str(write_rotated(tmp_path / "g.nc", rlat=rlat, rlon=rlon, pole_lat=30.0, pole_lon=10.0, years=1)))
    w = region_weights("tropics", ds)
    a = ds["cell_area"]
    assert float((w * a).sum() / a.sum()) == pytest.approx(0.5, abs=0.01)
    arctic = float((region_weights("arctic", ds) * a).sum() / a.sum())
    assert arctic == pytest.approx((1 - np.sin(np.deg2rad(60.0))) / 2, abs=0.01)


def test_rotated_coordinates_without_a_grid_mapping_are_refused(tmp_path):
    path = write_rotated(tmp_path / "r.nc", rlat=np.arange(-5.0, 5.1, 1.0), rlon=np.arange(-5.0, 5.1, 1.0), pole_lat=39.25, pole_lon=-162.0, years=1, mapping=False, aux_latlon=False)
    with pytest.raises(InputError, match="grid_latitude.*no grid mapping"):
        io.open_source(str(path))


def test_a_mapping_without_its_pole_is_refused(tmp_path):
    path = tmp_path / "r.nc"
    write_rotated(path, rlat=np.arange(-5.0, 5.1, 1.0), rlon=np.arange(-5.0, 5.1, 1.0), pole_lat=39.25, pole_lon=-162.0, years=1)
    with xr.open_dataset(path) as ds:
        broken = ds.load()
    del broken["rotated_pole"].attrs["grid_north_pole_latitude"]
    broken.to_netcdf(tmp_path / "broken.nc")
    with pytest.raises(InputError, match="grid_north_pole_latitude"):
        io.open_source(str(tmp_path / "broken.nc"))


def test_bilinear_is_exact_for_a_field_linear_in_rotated_coordinates(tmp_path):
    from pyproj import CRS, Transformer

    cf = {"grid_mapping_name": "rotated_latitude_longitude", "grid_north_pole_latitude": 39.25, "grid_north_pole_longitude": -162.0}
    to_rotated = Transformer.from_crs(CRS.from_epsg(4326), CRS.from_cf(cf), always_xy=True)  # outside reference

    def linear(lat, lon, year, month):
        rlon, rlat = to_rotated.transform(lon, lat)
        return 280.0 + 0.5 * rlat - 0.2 * rlon + 0.0 * year

    rlat, rlon = np.arange(-10.0, 10.01, 0.5), np.arange(-15.0, 12.01, 0.5)
    ds = io.open_source(str(write_rotated(tmp_path / "r.nc", rlat=rlat, rlon=rlon, pole_lat=39.25, pole_lon=-162.0, years=1, field=linear)))
    target = regular_grid(1.0, 1.0, south=40, north=60, west=-10, east=25)
    out = grids.regrid(ds["tas"].isel(time=0).astype("float64"), target, method="bilinear", source_grid=grids.grid_of(ds))
    tl, tt = np.meshgrid(target["lon"].values, target["lat"].values)
    trl, trp = to_rotated.transform(tl, tt)
    ok = np.isfinite(out.values)
    assert ok.mean() > 0.5
    # bilinear interpolation is exact for functions linear in each coordinate (textbook); float32 storage
    np.testing.assert_allclose(out.values[ok], (280.0 + 0.5 * trp - 0.2 * trl)[ok], atol=1e-4)


def test_a_pole_that_contradicts_the_files_own_latitudes_is_refused(tmp_path):
    path = tmp_path / "r.nc"
    write_rotated(path, rlat=np.arange(-5.0, 5.1, 1.0), rlon=np.arange(-5.0, 5.1, 1.0), pole_lat=39.25, pole_lon=-162.0, years=1)
    with xr.open_dataset(path) as ds:
        wrong = ds.load()
    wrong["rotated_pole"].attrs["grid_north_pole_longitude"] = -150.0  # the 2-D lat/lon keep the true pole
    wrong.to_netcdf(tmp_path / "wrong.nc")
    with pytest.raises(InputError, match="away from the file's own latitude/longitude"):
        io.open_source(str(tmp_path / "wrong.nc"))
