"""Unstructured meshes: cell centres on one dimension, angles in radians or degrees, areas
from cell_measures or spherical Voronoi cells (scipy) that tile the sphere, remapping by
centre binning (approximately conservative) and nearest."""

from __future__ import annotations

import numpy as np
import pytest
import xarray as xr
from cfdata import EARTH_RADIUS_M
from gridfiles import fibonacci_sphere, write_mesh

from evaluation import grids, io
from evaluation.errors import InputError
from evaluation.grids.target import regular_grid
from evaluation.grids.unstructured import voronoi_areas

SPHERE = 4 * np.pi * EARTH_RADIUS_M**2  # surface of a sphere (textbook)


def icosahedron() -> tuple[np.ndarray, np.ndarray]:
    """The 12 vertices of a regular icosahedron (textbook: cyclic permutations of (0, ±1, ±φ))."""
    g = (1 + 5**0.5) / 2
    v = np.array([(0, s1, s2 * g) for s1 in (-1, 1) for s2 in (-1, 1)], float)
    v = np.concatenate([v, np.roll(v, 1, axis=1), np.roll(v, 2, axis=1)])
    v /= np.linalg.norm(v, axis=1, keepdims=True)
    return np.rad2deg(np.arctan2(v[:, 1], v[:, 0])), np.rad2deg(np.arcsin(v[:, 2]))


@pytest.mark.parametrize("n", [12, 2000, 40962])
def test_voronoi_areas_tile_the_sphere(n):
    lon, lat = icosahedron() if n == 12 else fibonacci_sphere(n)
    area = voronoi_areas(lon, lat)
    assert area.sum() == pytest.approx(SPHERE, rel=1e-10)
    if n == 12:
        # the 12 Voronoi cells of an icosahedron's vertices are congruent pentagons: 4πR²/12
        np.testing.assert_allclose(area, SPHERE / 12, rtol=1e-10)


@pytest.fixture(scope="module")
def mesh(tmp_path_factory):
    lon, lat = fibonacci_sphere(6000)
    path = write_mesh(tmp_path_factory.mktemp("mesh") / "m.nc", lat=lat, lon=lon, years=1, angle_units=None)
    return io.open_source(str(path)), lon, lat


def test_cell_centres_in_radians_without_units_are_read_by_their_names(mesh):
    ds, lon, lat = mesh
    assert grids.kind_of(ds) == "unstructured" and ds["tas"].dims == ("time", "cell")
    np.testing.assert_allclose(ds["lat"].values, lat, atol=1e-9)
    np.testing.assert_allclose(ds["lon"].values, lon, atol=1e-9)
    assert float(ds["cell_area"].sum()) == pytest.approx(SPHERE, rel=1e-10)
    assert "latCell" not in ds.data_vars


@pytest.mark.parametrize("angle_units", ["radians", "degrees"])
def test_units_decide_radians_or_degrees(tmp_path, angle_units):
    lon, lat = fibonacci_sphere(500)
    # radians need standard_name to say which is latitude (as some models write: units 'radian')
    path = write_mesh(tmp_path / "m.nc", lat=lat, lon=lon, years=1, angle_units=angle_units, names=("lat_c", "lon_c"), standard_names=True)
    ds = io.open_source(str(path))
    np.testing.assert_allclose(ds["lat"].values, lat, atol=1e-9)


def test_unknown_names_without_units_are_refused(tmp_path):
    lon, lat = fibonacci_sphere(500)
    # without units and with names no convention fixes, degrees and radians cannot be told apart
    path = write_mesh(tmp_path / "m.nc", lat=lat, lon=lon, years=1, angle_units=None, names=("lat_c", "lon_c"))
    with xr.open_dataset(path) as ds:
        ds = ds.load()
    ds["lat_c"].attrs["standard_name"] = "latitude"
    ds["lon_c"].attrs["standard_name"] = "longitude"
    ds.to_netcdf(tmp_path / "n.nc")
    with pytest.raises(InputError, match="no units"):
        io.open_source(str(tmp_path / "n.nc"))


def test_repeated_centres_are_refused(tmp_path):
    lon, lat = fibonacci_sphere(500)
    lon[7], lat[7] = lon[3], lat[3]
    with pytest.raises(InputError, match="share one centre"):
        io.open_source(str(write_mesh(tmp_path / "m.nc", lat=lat, lon=lon, years=1)))


def test_a_regional_mesh_needs_its_cell_areas(tmp_path):
    lon, lat = fibonacci_sphere(20000)
    box = (lat > 30) & (lat < 60) & (lon > -10) & (lon < 30)
    with pytest.raises(InputError, match="does not cover the globe"):
        io.open_source(str(write_mesh(tmp_path / "r.nc", lat=lat[box], lon=lon[box], years=1)))
    area = np.full(box.sum(), 1e9)
    ds = io.open_source(str(write_mesh(tmp_path / "a.nc", lat=lat[box], lon=lon[box], years=1, area=area)))
    np.testing.assert_array_equal(ds["cell_area"].values, area)


def test_conservative_from_a_global_mesh_overlaps_its_voronoi_cells(mesh):
    import shapely

    from evaluation.grids import remap_polygons
    from evaluation.grids.unstructured import voronoi_edges

    ds, lon, lat = mesh
    target = regular_grid(5.0, 5.0)
    field = ds["tas"].isel(time=0).astype("float64").load()
    out = grids.regrid(field, target, method="conservative", source_grid=grids.grid_of(ds))
    assert not np.isnan(out.values).any()
    a, b, cell = voronoi_edges(lon, lat)
    sampled = shapely.area(remap_polygons.edge_polygons(a, b, cell, lon.size, kind="unstructured", min_points=2)) * EARTH_RADIUS_M**2 * np.deg2rad(1.0)
    assert sampled.sum() == pytest.approx(SPHERE, rel=1e-11)  # the sampled Voronoi cells tile the sphere
    # sampled edges vs scipy's exact Voronoi areas: measured median 3e-6, at most 4e-5
    np.testing.assert_allclose(sampled, ds["cell_area"].values, rtol=1e-4)
    # conservation (Jones 1999) with the areas the weights use, to rounding
    mean_src = np.sum(field.values * sampled) / sampled.sum()
    mean_tgt = float((out * target["cell_area"]).sum() / target["cell_area"].sum())
    assert mean_tgt == pytest.approx(mean_src, rel=1e-10)


@pytest.fixture(scope="module")
def mesh_with_areas(tmp_path_factory):
    lon, lat = fibonacci_sphere(6000)
    area = voronoi_areas(lon, lat)  # given by the file: the map bins by centres
    path = write_mesh(tmp_path_factory.mktemp("mesh") / "a.nc", lat=lat, lon=lon, years=1, area=area)
    return io.open_source(str(path)), lon, lat


def test_binned_remap_keeps_a_constant_and_nearly_the_global_mean(mesh_with_areas):
    ds, _, _ = mesh_with_areas
    target = regular_grid(5.0, 5.0)
    field = ds["tas"].isel(time=0).astype("float64").load()
    out = grids.regrid(field, target, method="conservative", source_grid=grids.grid_of(ds))
    assert not np.isnan(out.values).any()
    const = grids.regrid(field * 0 + 3.0, target, method="conservative", source_grid=grids.grid_of(ds))
    np.testing.assert_allclose(const.values, 3.0, rtol=1e-13)
    mean_src = float((field * ds["cell_area"]).sum() / ds["cell_area"].sum())
    mean_tgt = float((out * target["cell_area"]).sum() / target["cell_area"].sum())
    # centre binning is not exactly conservative: measured 2e-5 relative here (stated in the provenance)
    assert mean_tgt == pytest.approx(mean_src, rel=1e-4)


def test_a_target_finer_than_the_mesh_takes_the_nearest_cell(mesh_with_areas):
    ds, lon, _ = mesh_with_areas
    target = regular_grid(0.5, 0.5, south=-10, north=10, west=-10, east=10)
    field = xr.DataArray(np.arange(lon.size, dtype="float64"), dims="cell")
    out = grids.regrid(field, target, method="conservative", source_grid=grids.grid_of(ds))
    assert not np.isnan(out.values).any()
    # most target cells hold no centre: they take one cell's own value, not an average
    assert np.isin(out.values, field.values).mean() > 0.9


def test_bilinear_from_a_mesh_is_refused_with_the_methods_it_has(mesh):
    ds, _, _ = mesh
    with pytest.raises(InputError, match="not available from unstructured grids.*conservative or nearest"):
        grids.regrid(ds["tas"].isel(time=0), regular_grid(5.0, 5.0), method="bilinear", source_grid=grids.grid_of(ds))


def test_energy_budget_of_a_run_on_a_mesh(tmp_path):
    from evaluation.budget import budget_table
    from evaluation.scoring import Source

    lon, lat = fibonacci_sphere(3000)
    fields = {
        "rsdt": ("toa_incoming_shortwave_flux", "W m-2", 340.0),
        "rsut": ("toa_outgoing_shortwave_flux", "W m-2", 100.0),
        "rlut": ("toa_outgoing_longwave_flux", "W m-2", 239.0),
        "tas": ("air_temperature", "K", 288.0),
    }
    paths = [
        str(write_mesh(tmp_path / f"{v}.nc", lat=lat, lon=lon, field=lambda la, lo, y, m, c=c: c + 0 * la + 0 * y, variable=v, standard_name=sn, units=u, years=3))
        for v, (sn, u, c) in fields.items()
    ]
    table = budget_table([Source(name="m", role="model", paths=paths)], period=None).set_index("metric")["value"]
    # global means of uniform fields on any grid are the fields themselves: net = 340 - 100 - 239,
    # albedo = 100 / 340 (definitions, textbook)
    assert table["toa_net"] == pytest.approx(1.0, abs=1e-9)
    assert table["albedo"] == pytest.approx(100.0 / 340.0, rel=1e-12)


def test_a_ugrid_mesh_is_found_through_its_face_coordinates(tmp_path):
    lon, lat = fibonacci_sphere(800)
    path = write_mesh(tmp_path / "u.nc", lat=lat, lon=lon, years=1, angle_units="degrees", names=("mesh_face_y", "mesh_face_x"))
    with xr.open_dataset(path) as ds:
        ds = ds.load()
    # UGRID 1.0: a mesh topology variable names the face (cell) centre coordinates
    ds["mesh"] = ((), np.int32(0), {"cf_role": "mesh_topology", "topology_dimension": 2, "face_coordinates": "mesh_face_x mesh_face_y"})
    ds["mesh_face_x"].attrs["standard_name"] = "longitude"
    ds["mesh_face_y"].attrs["standard_name"] = "latitude"
    ds.to_netcdf(tmp_path / "ugrid.nc")
    desc = grids.describe(xr.open_dataset(tmp_path / "ugrid.nc"))
    assert desc.kind == "unstructured" and "UGRID mesh 'mesh'" in desc.how
    opened = io.open_source(str(tmp_path / "ugrid.nc"))
    np.testing.assert_allclose(opened["lat"].values, lat, atol=1e-9)
