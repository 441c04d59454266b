"""Curvilinear grids: 2-D latitude/longitude found through ``coordinates`` and CF attributes,
corners from CF vertex bounds or inferred, areas as great-circle polygons (pyproj Geod on a
sphere as outside reference), conservative/bilinear/nearest remapping."""

from __future__ import annotations

import numpy as np
import pytest
import shapely
from cfdata import EARTH_RADIUS_M
from gridfiles import true_positions, write_curvilinear

from evaluation import grids, io
from evaluation.errors import InputError
from evaluation.grids import remap_polygons
from evaluation.grids.target import regular_grid

SPHERE = 4 * np.pi * EARTH_RADIUS_M**2  # surface of a sphere (textbook)


def rotated_regular(dlat: float, pole_lat: float, pole_lon: float, *, south=-90.0, north=90.0, west=-180.0, east=180.0):
    """A curvilinear grid made by rotating a regular one: centres and CF vertices from pyproj."""
    edges_lat = np.arange(south, north + 1e-9, dlat)
    edges_lon = np.arange(west, east + 1e-9, dlat)
    clat, clon = 0.5 * (edges_lat[1:] + edges_lat[:-1]), 0.5 * (edges_lon[1:] + edges_lon[:-1])
    rl, rp = np.meshgrid(clon, clat)
    lon, lat = true_positions(rl, rp, pole_lat, pole_lon)
    vlat = np.stack([edges_lat[:-1], edges_lat[:-1], edges_lat[1:], edges_lat[1:]], -1)[:, None, :].repeat(clon.size, 1)
    vlon = np.stack([edges_lon[:-1], edges_lon[1:], edges_lon[1:], edges_lon[:-1]], -1)[None, :, :].repeat(clat.size, 0)
    lon_v, lat_v = true_positions(vlon, vlat, pole_lat, pole_lon)
    return lat, lon, lat_v, lon_v


def test_found_through_the_coordinates_attribute_with_y_the_latitude_dimension(tmp_path):
    lat, lon, _, _ = rotated_regular(2.0, 50.0, 10.0, south=-10, north=10, west=-20, east=20)
    # stored transposed, dimensions (x, y), as some regional models write them
    path = write_curvilinear(tmp_path / "c.nc", lat=lat.T, lon=lon.T, dims=("xc", "yc"), years=1)
    raw_desc = grids.describe(__import__("xarray").open_dataset(path))
    assert raw_desc.kind == "curvilinear" and raw_desc.dims == ("yc", "xc")
    ds = io.open_source(str(path))
    assert grids.kind_of(ds) == "curvilinear" and ds["tas"].dims == ("time", "y", "x")
    np.testing.assert_allclose(ds["lat"].values, lat, atol=1e-6)
    np.testing.assert_allclose(ds["lon"].values, lon, atol=1e-6)
    assert "nav_lat" not in ds.coords and "nav_lat" not in ds.data_vars


def test_areas_from_cf_vertices_are_great_circle_polygons(tmp_path):
    from pyproj import Geod

    lat, lon, lat_v, lon_v = rotated_regular(3.0, 35.0, -150.0, south=-30, north=30, west=-30, east=30)
    ds = io.open_source(str(write_curvilinear(tmp_path / "c.nc", lat=lat, lon=lon, lat_vertices=lat_v, lon_vertices=lon_v, years=1)))
    np.testing.assert_allclose(ds["lat_bnds"].values, lat_v, atol=1e-9)
    geod = Geod(a=EARTH_RADIUS_M, b=EARTH_RADIUS_M)  # outside reference: geodesic polygons on a sphere
    for j, i in ((0, 0), (7, 11), (19, 3)):
        area, _ = geod.polygon_area_perimeter(lon_v[j, i], lat_v[j, i])
        assert float(ds["cell_area"].values[j, i]) == pytest.approx(abs(area), rel=1e-9)


def test_inferred_corners_of_a_regular_grid_written_as_curvilinear(tmp_path):
    lon2, lat2 = np.meshgrid(np.arange(-29.0, 30.0, 2.0), np.arange(-19.0, 20.0, 2.0))
    ds = io.open_source(str(write_curvilinear(tmp_path / "c.nc", lat=lat2, lon=lon2, years=1)))
    # the regular cell is bounded by parallels, the inferred one by great circles through its
    # corners: the areas agree to the size of that difference (measured: 3e-4 inside, 6.4e-4
    # in the four corner cells, whose outer corner is extrapolated in both directions)
    lo, hi = np.deg2rad(lat2 - 1.0), np.deg2rad(lat2 + 1.0)
    exact = EARTH_RADIUS_M**2 * (np.sin(hi) - np.sin(lo)) * np.deg2rad(2.0)
    np.testing.assert_allclose(ds["cell_area"].values, exact, rtol=1e-3)
    # corners are the normalised means of four unit vectors: within 0.01° of the parallels here (measured 0.009°)
    np.testing.assert_allclose(ds["lat_bnds"].values[..., 0], lat2 - 1.0, atol=0.01)


def test_cell_measures_are_used_when_given(tmp_path):
    lon2, lat2 = np.meshgrid(np.arange(-29.0, 30.0, 2.0), np.arange(-19.0, 20.0, 2.0))
    area = np.full(lat2.shape, 1.234e10)
    ds = io.open_source(str(write_curvilinear(tmp_path / "c.nc", lat=lat2, lon=lon2, area=area, years=1)))
    np.testing.assert_array_equal(ds["cell_area"].values, area)


def test_global_curvilinear_grid_conserves_the_mean(tmp_path):
    lat, lon, lat_v, lon_v = rotated_regular(4.0, 25.0, 45.0)
    ds = io.open_source(str(write_curvilinear(tmp_path / "g.nc", lat=lat, lon=lon, lat_vertices=lat_v, lon_vertices=lon_v, years=1)))
    field = ds["tas"].isel(time=0).astype("float64").load()
    target = regular_grid(5.0, 5.0)
    out = grids.regrid(field, target, method="conservative", source_grid=grids.grid_of(ds))
    assert not np.isnan(out.values).any()
    sampled = shapely.area(remap_polygons.cell_polygons(grids.grid_of(ds), "curvilinear")) * EARTH_RADIUS_M**2 * np.deg2rad(1.0)
    assert sampled.sum() == pytest.approx(SPHERE, rel=1e-11)
    # sampling accuracy, measured: median 1e-6, at most 3.5e-4 for cells within a few degrees of a true pole
    err = np.abs(sampled / ds["cell_area"].values.ravel() - 1)
    assert np.median(err) < 1e-5 and err.max() < 5e-4
    mean_src = np.sum(field.values.ravel() * sampled) / sampled.sum()
    mean_tgt = float((out * target["cell_area"]).sum() / target["cell_area"].sum())
    # conservation (Jones 1999) to rounding, with the areas the weights use
    assert mean_tgt == pytest.approx(mean_src, rel=1e-10)


def test_conservative_leaves_a_constant_constant_and_misses_nothing_inside(tmp_path):
    # pole 50N 170W: the rotated origin lies at 40N 10E
    lat, lon, lat_v, lon_v = rotated_regular(1.0, 50.0, -170.0, south=-10, north=10, west=-15, east=15)
    ds = io.open_source(str(write_curvilinear(tmp_path / "c.nc", lat=lat, lon=lon, lat_vertices=lat_v, lon_vertices=lon_v, years=1)))
    const = ds["tas"].isel(time=0).load() * 0 + 4.5
    target = regular_grid(2.0, 2.0, south=30, north=60, west=-20, east=40)
    out = grids.regrid(const, target, method="conservative", source_grid=grids.grid_of(ds))
    np.testing.assert_allclose(out.values[np.isfinite(out.values)], 4.5, rtol=1e-12)
    assert np.isfinite(out.sel(lat=41.0, lon=11.0).item()) and np.isnan(out.sel(lat=31.0, lon=-19.0).item())


def test_bilinear_on_a_sheared_grid_is_mostly_exact_for_a_linear_field(tmp_path):
    # a sheared grid: cells are parallelograms in (lon, lat), on which bilinear interpolation
    # in the index space is linear in lon and lat (textbook), so a linear field comes back exactly
    j, i = np.meshgrid(np.arange(30.0), np.arange(40.0), indexing="ij")
    lon2, lat2 = -20.0 + 1.0 * i + 0.3 * j, 30.0 + 0.8 * j
    values = (3.0 + 0.2 * lat2 - 0.1 * lon2)[None]
    ds = io.open_source(str(write_curvilinear(tmp_path / "s.nc", lat=lat2, lon=lon2, values=values, years=1)))
    target = regular_grid(1.0, 1.0, south=35, north=50, west=-10, east=15)
    out = grids.regrid(ds["tas"].isel(time=0).astype("float64"), target, method="bilinear", source_grid=grids.grid_of(ds))
    tl, tt = np.meshgrid(target["lon"].values, target["lat"].values)
    ok = np.isfinite(out.values)
    assert ok.sum() > 0.8 * ok.size
    err = np.abs(out.values[ok] - (3.0 + 0.2 * tt - 0.1 * tl)[ok])
    # pyresample picks the four nearest centres, not always the enclosing cell: measured 92 %
    # of the targets exact, the rest within 1 % of the field's range (stated in remap_points)
    assert np.mean(err < 1e-4) > 0.85 and err.max() < 0.01 * 10.0


def test_nearest_takes_the_closest_centre(tmp_path):
    lon2, lat2 = np.meshgrid(np.arange(-9.5, 10.0, 1.0), np.arange(40.5, 50.0, 1.0))
    values = (lat2 * 100 + lon2)[None]
    ds = io.open_source(str(write_curvilinear(tmp_path / "n.nc", lat=lat2, lon=lon2, values=values, years=1)))
    target = regular_grid(1.0, 1.0, south=40, north=50, west=-10, east=10)
    out = grids.regrid(ds["tas"].isel(time=0).astype("float64"), target, method="nearest", source_grid=grids.grid_of(ds))
    tl, tt = np.meshgrid(target["lon"].values, target["lat"].values)
    np.testing.assert_allclose(out.values, tt * 100 + tl, rtol=1e-6)  # float32 storage


def test_one_cell_wide_without_bounds_is_refused(tmp_path):
    lon2, lat2 = np.meshgrid(np.arange(-9.5, 10.0, 1.0), np.array([45.0]))
    with pytest.raises(InputError, match="one cell wide"):
        io.open_source(str(write_curvilinear(tmp_path / "w.nc", lat=lat2, lon=lon2, years=1)))


@pytest.mark.parametrize("target", [[], ["--target-grid", "1x1"]], ids=["box around the domain", "global 1x1"])
def test_a_regional_grid_weights_the_target_cells_on_its_edge_by_the_part_it_covers(tmp_path, monkeypatch, target):
    """The default target of a regional curvilinear reference is a regular box around it; a
    box cell on the domain's edge is partly outside, and its value is the mean of the covered
    part. The area mean must weight that cell by the covered part only, so it equals the mean
    over the source cells weighted by their own areas."""
    import pandas as pd
    from pyproj import Geod

    from app.cli import main

    monkeypatch.setenv("GRIDSCORE_CACHE", "off")
    lat, lon, lat_v, lon_v = rotated_regular(0.5, 55.0, -140.0, south=-8, north=8, west=-10, east=10)
    ring = np.zeros(lat.shape)
    ring[:2, :], ring[-2:, :], ring[:, :2], ring[:, -2:] = 1.0, 1.0, 1.0, 1.0  # the domain's edge: 1, inside: 0
    # stored with the x dimension first, as the regional model's file does
    path = write_curvilinear(tmp_path / "c.nc", lat=lat.T, lon=lon.T, lat_vertices=lat_v.transpose(1, 0, 2), lon_vertices=lon_v.transpose(1, 0, 2),
                             values=ring.T, dims=("xc", "yc"), years=1, variable="pr", units="mm day-1", standard_name="precipitation_amount")
    geod = Geod(a=EARTH_RADIUS_M, b=EARTH_RADIUS_M)  # outside reference: geodesic polygons on a sphere
    area = np.array([[abs(geod.polygon_area_perimeter(lon_v[j, i], lat_v[j, i])[0]) for i in range(lat.shape[1])] for j in range(lat.shape[0])])
    expected = float((ring * area).sum() / area.sum())  # area-weighted mean over the source cells (common practice)
    out = tmp_path / "s.csv"
    assert main(["score", "--reference", f"ref={path}", "--model", f"run={path}", "--variable", "pr", "--season", "JAN", "--output", str(out), *target]) == 0
    table = pd.read_csv(out)
    mean = float(table.loc[table["metric"] == "mean", "value"].iloc[0])
    # the overlaps are of cells sampled along their edges (about 1e-5 of a cell's area); counting
    # the edge target cells whole gave 1.2 times the true value here
    assert mean == pytest.approx(expected, rel=1e-4)
