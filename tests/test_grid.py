"""Tests of evaluation.grid: exact cell areas, inferred bounds, conservative and bilinear
remapping checked against a dense overlap matrix written out here in numpy."""

from __future__ import annotations

import numpy as np
import pytest
import xarray as xr
from cfdata import EARTH_RADIUS_M, default_field, exact_area, write_cf

from evaluation import io
from evaluation.errors import InputError
from evaluation.grid import cell_area, grid_of, infer_bounds, regrid, same_grid


def overlap(src: np.ndarray, tgt: np.ndarray, *, period: float | None = None) -> np.ndarray:
    """Lengths of the overlaps of source intervals (rows) with target intervals (columns)."""
    total = np.zeros((src.shape[0], tgt.shape[0]))
    shifts = (0.0,) if period is None else (-period, 0.0, period)
    for s in shifts:
        lo = np.maximum(src[:, None, 0] + s, tgt[None, :, 0])
        hi = np.minimum(src[:, None, 1] + s, tgt[None, :, 1])
        total += np.clip(hi - lo, 0.0, None)
    return total


def hand_conservative(values: np.ndarray, src: xr.Dataset, tgt: xr.Dataset) -> np.ndarray:
    """First-order conservative remapping (Jones 1999, MWR 127): area-weighted mean of the
    source cells each target cell overlaps, NaN source cells left out of both sums."""
    mu = lambda b: np.sin(np.deg2rad(b))  # noqa: E731  (area in latitude is linear in sin φ)
    a_lat = overlap(mu(src["lat_bnds"].values), mu(tgt["lat_bnds"].values))
    a_lon = overlap(src["lon_bnds"].values, tgt["lon_bnds"].values, period=360.0)
    valid = np.isfinite(values)
    x = np.where(valid, values, 0.0)
    num = a_lat.T @ x @ a_lon
    den = a_lat.T @ valid.astype(float) @ a_lon
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(den > 0, num / den, np.nan)


def opened(tmp_path, name, **kw) -> xr.Dataset:
    return io.open_source(str(write_cf(tmp_path / name, years=1, **kw)))


# ---------------------------------------------------------------------------- areas and bounds


@pytest.mark.parametrize(("dlat", "dlon"), [(2.0, 2.0), (2.5, 3.75), (4.5, 4.5), (0.5, 1.0)])
def test_cell_areas_tile_the_sphere(dlat, dlon):
    lat_b = infer_bounds(np.arange(-90 + dlat / 2, 90, dlat), kind="lat")
    lon_b = infer_bounds(np.arange(-180 + dlon / 2, 180, dlon), kind="lon")
    area = cell_area(lat_b, lon_b)
    # surface of a sphere 4πR² (textbook)
    assert float(area.sum()) == pytest.approx(4 * np.pi * EARTH_RADIUS_M**2, rel=1e-13)
    np.testing.assert_allclose(area.values, exact_area(lat_b, lon_b), rtol=1e-13)
    assert area.attrs["units"] == "m2"


def test_one_degree_equatorial_cell_area():
    # a 1°×1° cell at the equator is about 111.2 km × 111.2 km = 12 364 km² (value from memory)
    a = float(cell_area(np.array([[0.0, 1.0]]), np.array([[0.0, 1.0]])).item())
    assert a / 1e6 == pytest.approx(12364.0, rel=1e-3)


def test_inferred_bounds_are_half_way_and_clipped_at_the_poles():
    b = infer_bounds(np.array([-88.0, -80.0, -70.0, 89.0]), kind="lat")
    np.testing.assert_allclose(b, [[-90.0, -84.0], [-84.0, -75.0], [-75.0, 9.5], [9.5, 90.0]])
    lon = infer_bounds(np.array([0.0, 10.0, 20.0]), kind="lon")
    np.testing.assert_allclose(lon, [[-5, 5], [5, 15], [15, 25]])
    assert infer_bounds(np.array([10.0]), kind="lon").tolist() == [[-170.0, 190.0]]


@pytest.mark.parametrize("n", [32, 64, 94])
def test_inferred_bounds_of_a_gaussian_grid_reach_the_poles(n):
    # Gaussian latitudes: arcsin of the Gauss-Legendre nodes (numpy.polynomial.legendre, reference library)
    nodes, _ = np.polynomial.legendre.leggauss(n)
    lat = np.rad2deg(np.arcsin(nodes))
    b = infer_bounds(lat, kind="lat")
    assert b[0, 0] == -90.0 and b[-1, 1] == 90.0
    lon_b = infer_bounds(np.arange(0.0, 360.0, 360.0 / (2 * n)), kind="lon")
    assert float(cell_area(b, lon_b).sum()) == pytest.approx(4 * np.pi * EARTH_RADIUS_M**2, rel=1e-13)


def test_grid_of_and_same_grid(tmp_path):
    a = opened(tmp_path, "a.nc", dlat=2.0)
    b = opened(tmp_path, "b.nc", dlat=2.0, lon_0_360=True, lat_descending=True)
    c = opened(tmp_path, "c.nc", dlat=2.5)
    g = grid_of(a)
    assert set(g.coords) == {"lat", "lon", "lat_bnds", "lon_bnds", "cell_area"} and not g.data_vars
    assert same_grid(a, b) and not same_grid(a, c)


# ---------------------------------------------------------------------------- conservative


@pytest.fixture(scope="module")
def two_grids(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("grids")
    src = io.open_source(str(write_cf(tmp / "src.nc", dlat=2.5, years=1)))
    tgt = io.open_source(str(write_cf(tmp / "tgt.nc", dlat=2.0, years=1)))
    return src, tgt


def test_conservative_matches_the_dense_overlap_computation(two_grids):
    src, tgt = two_grids
    field = src["tas"].isel(time=0).astype("float64").load()
    out = regrid(field, tgt, method="conservative", source_grid=grid_of(src))
    expected = hand_conservative(field.values, src, tgt)
    np.testing.assert_allclose(out.values, expected, rtol=1e-12)
    assert not np.isnan(out.values).any()  # a global source covers every target cell, poles and dateline too


def test_conservative_keeps_the_global_mean(two_grids):
    src, tgt = two_grids
    field = src["tas"].isel(time=0).astype("float64").load()
    out = regrid(field, tgt, method="conservative", source_grid=grid_of(src))
    mean_src = np.average(field.values, weights=src["cell_area"].values)  # area-weighted mean (common practice)
    mean_tgt = np.average(out.values, weights=tgt["cell_area"].values)
    assert mean_tgt == pytest.approx(mean_src, rel=1e-13)


def test_conservative_leaves_a_constant_field_constant(two_grids):
    src, tgt = two_grids
    const = xr.full_like(src["tas"].isel(time=0).astype("float64").load(), 7.25)
    out = regrid(const, tgt, method="conservative", source_grid=grid_of(src))
    np.testing.assert_allclose(out.values, 7.25, rtol=1e-14)


def test_conservative_skips_missing_source_cells(two_grids):
    src, tgt = two_grids
    field = src["tas"].isel(time=0).astype("float64").load()
    holes = field.where(~((field["lat"] > 20) & (field["lat"] < 50) & (field["lon"] > 0) & (field["lon"] < 40)))
    out = regrid(holes, tgt, method="conservative", source_grid=grid_of(src))
    np.testing.assert_allclose(out.values, hand_conservative(holes.values, src, tgt), rtol=1e-12)
    # a target cell entirely inside the hole is missing, not zero
    assert np.isnan(out.sel(lat=35.0, lon=21.0).item())


def test_conservative_is_lazy_on_dask_input(two_grids):
    src, tgt = two_grids
    out = regrid(src["tas"], tgt, method="conservative", source_grid=grid_of(src))
    assert out.chunks is not None
    assert out.dims == ("time", "lat", "lon")
    np.testing.assert_array_equal(out["cell_area"].values, tgt["cell_area"].values)


def test_regional_source_leaves_uncovered_target_cells_missing(tmp_path):
    src = opened(tmp_path, "box.nc", lat=np.arange(-19.0, 20.0, 2.0), lon=np.arange(-39.0, 40.0, 2.0))
    tgt = opened(tmp_path, "glob.nc", dlat=5.0)
    out = regrid(src["tas"].isel(time=0).astype("float64").load(), tgt, method="conservative", source_grid=grid_of(src))
    assert np.isnan(out.sel(lat=52.5, lon=2.5).item())
    assert np.isnan(out.sel(lat=2.5, lon=102.5).item())
    assert np.isfinite(out.sel(lat=2.5, lon=2.5).item())


def test_conservative_from_0_360_source_gives_the_same_numbers(tmp_path):
    a = opened(tmp_path, "a.nc", dlat=2.5)
    b = opened(tmp_path, "b.nc", dlat=2.5, lon_0_360=True, lat_descending=True)
    tgt = opened(tmp_path, "t.nc", dlat=2.0)
    ra = regrid(a["tas"].isel(time=0).load(), tgt, source_grid=grid_of(a))
    rb = regrid(b["tas"].isel(time=0).load(), tgt, source_grid=grid_of(b))
    np.testing.assert_allclose(ra.values, rb.values, rtol=1e-6)  # float32 storage


# ---------------------------------------------------------------------------- bilinear


def test_bilinear_reproduces_a_linear_field(two_grids):
    src, tgt = two_grids
    lat, lon = xr.broadcast(src["lat"], src["lon"])
    linear = (0.3 * lat + 0.01 * lon).transpose("lat", "lon")
    out = regrid(linear, tgt, method="bilinear", source_grid=grid_of(src))
    inner = out.sel(lat=slice(-85, 85), lon=slice(-175, 175))
    lat_t, lon_t = xr.broadcast(inner["lat"], inner["lon"])
    # bilinear interpolation is exact for functions linear in each coordinate (textbook)
    np.testing.assert_allclose(inner.values, (0.3 * lat_t + 0.01 * lon_t).transpose("lat", "lon").values, atol=1e-9)


def test_bilinear_wraps_round_the_dateline(two_grids):
    src, tgt = two_grids
    lat, lon = xr.broadcast(src["lat"], src["lon"])
    periodic = np.cos(np.deg2rad(lon)).transpose("lat", "lon")
    out = regrid(periodic, tgt, method="bilinear", source_grid=grid_of(src))
    edge = out.sel(lat=slice(-60, 60)).isel(lon=[0, -1])
    assert not np.isnan(edge.values).any()
    np.testing.assert_allclose(edge.values, np.cos(np.deg2rad(edge["lon"].values))[None, :].repeat(edge.sizes["lat"], 0), atol=2e-3)


def test_unknown_regrid_method_is_an_input_error(two_grids):
    src, tgt = two_grids
    with pytest.raises(InputError, match="unknown regrid method"):
        regrid(src["tas"], tgt, method="cubic")  # type: ignore[arg-type]


def test_field_values_are_the_physical_function(tmp_path):
    # the fixture's field, sampled at the normalised centres, is what the file holds
    ds = opened(tmp_path, "f.nc", dlat=10.0, lon_0_360=True, lat_descending=True)
    lat, lon = np.meshgrid(ds["lat"].values, ds["lon"].values, indexing="ij")
    expected = default_field(lat, lon, np.array(1990.0), np.array(1.0))
    np.testing.assert_allclose(ds["tas"].isel(time=0).values, expected, rtol=1e-6)


@pytest.mark.parametrize(("dims", "dtype"), [(("year", "lat", "lon"), np.float64), (("time", "lat", "lon"), np.float32),
                                             (("lat", "lon"), np.float64), (("lat", "lon", "year"), np.float64)])
@pytest.mark.parametrize("mask", ["fixed", "varying"])
@pytest.mark.filterwarnings("ignore:invalid value encountered in divide:RuntimeWarning")  # the library's 0/0 where no valid cell
def test_conservative_in_memory_equals_xarray_regrid_apply_weights(dims, dtype, mask):
    """Values in memory take a numpy/scipy.sparse path; values in dask take xarray-regrid's own
    ``apply_weights`` (the library, the outside reference here): the same numbers to rounding,
    the same missing cells, dims, coordinates, name and attributes, with missing cells fixed in
    every step (a land mask) or changing from step to step."""
    from evaluation.grids.remap_regular import conservative

    def grid(step: float, shift: float) -> xr.Dataset:
        lat = np.arange(-90 + step / 2, 90, step)
        lon = np.arange(-180 + step / 2 + shift, 180 + shift, step)
        ds = xr.Dataset(coords={"lat": lat, "lon": lon})
        ds["lat_bnds"] = (("lat", "bnds"), np.stack([lat - step / 2, lat + step / 2], 1))
        ds["lon_bnds"] = (("lon", "bnds"), np.stack([lon - step / 2, lon + step / 2], 1))
        return ds

    src, tgt = grid(3.75, 0.0), grid(2.5, 0.5)
    sizes = {"year": 6, "time": 4, "lat": src.sizes["lat"], "lon": src.sizes["lon"]}
    rng = np.random.default_rng(7)
    values = rng.normal(size=[sizes[d] for d in dims]).astype(dtype)
    if mask == "fixed":
        values[..., :5, :] = np.nan if dims[-1] == "lon" else values[..., :5, :]
        if dims[-1] != "lon":
            values[:5] = np.nan
    else:
        values[values > 1.2] = np.nan
    coords = {"lat": src["lat"].values, "lon": src["lon"].values}
    if "year" in dims:
        coords["year"] = np.arange(sizes["year"])
    da = xr.DataArray(values, dims=dims, coords=coords, name="tas", attrs={"units": "K"})
    fast = conservative(da, src, tgt)
    library = conservative(da.chunk(), src, tgt).compute()
    assert fast.dims == library.dims and fast.dtype == library.dtype and fast.name == library.name
    assert fast.attrs == library.attrs and set(fast.coords) == set(library.coords)
    np.testing.assert_array_equal(np.isnan(fast.values), np.isnan(library.values))
    tolerance = 1e-6 if dtype == np.float32 else 1e-14
    np.testing.assert_allclose(fast.values, library.values, rtol=tolerance, atol=tolerance, equal_nan=True)
    for name in fast.coords:
        np.testing.assert_array_equal(fast[name].values, library[name].values)
