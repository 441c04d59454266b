"""Tests of evaluation.regions: fractional cell weights for latitude bands, boxes across the
dateline, land and ocean from a file's land fraction or from the bundled one."""

from __future__ import annotations

import numpy as np
import pytest
from cfdata import EARTH_RADIUS_M, exact_area, write_cf

from evaluation import io
from evaluation.errors import InputError
from evaluation.regions import REGIONS, land_fraction, parse_region, region_weights


def zone_area(south: float, north: float, west: float = 0.0, east: float = 360.0) -> float:
    """Area of a latitude-longitude box on a sphere: R² (sin φn − sin φs) Δλ (textbook formula)."""
    width = np.deg2rad((east - west) % 360.0 or 360.0)
    return EARTH_RADIUS_M**2 * (np.sin(np.deg2rad(north)) - np.sin(np.deg2rad(south))) * width


@pytest.fixture(scope="module")
def odd_grid(tmp_path_factory):
    """A 4.5° grid: 30°, 60° and the box edges below all cut through cells."""
    path = write_cf(tmp_path_factory.mktemp("grid") / "g.nc", dlat=4.5, years=1)
    return io.open_source(str(path))


def hand_fraction(lat_bnds, lon_bnds, south, north, arcs):
    """Area fraction of each cell inside [south, north] × the union of longitude arcs.

    Written independently of the module: latitude overlap measured in sin(latitude) (equal
    area), longitude overlap summed over explicit non-wrapping arcs.
    """
    s_lo, s_hi = np.sin(np.deg2rad(lat_bnds[:, 0])), np.sin(np.deg2rad(lat_bnds[:, 1]))
    a, b = np.sin(np.deg2rad(south)), np.sin(np.deg2rad(north))
    flat = np.maximum(0.0, np.minimum(s_hi, b) - np.maximum(s_lo, a)) / (s_hi - s_lo)
    lo, hi = lon_bnds[:, 0], lon_bnds[:, 1]
    flon = sum(np.maximum(0.0, np.minimum(hi, e) - np.maximum(lo, w)) for w, e in arcs) / (hi - lo)
    return flat[:, None] * flon[None, :]


@pytest.mark.parametrize(
    ("region", "south", "north"),
    [("global", -90, 90), ("tropics", -30, 30), ("nh-extratropics", 30, 90), ("sh-extratropics", -90, -30), ("arctic", 60, 90), ("antarctic", -90, -60)],
)
def test_band_areas_equal_the_spherical_zone_area(odd_grid, region, south, north):
    w = region_weights(region, odd_grid)
    area = float((w * odd_grid["cell_area"]).sum())
    assert area == pytest.approx(zone_area(south, north), rel=1e-12)


def test_a_cell_partly_in_a_band_counts_by_its_area_share(tmp_path):
    # one cell from 28° to 32°: half of it by latitude, not quite half by area, lies in the tropics
    lat = np.array([-60.0, -20.0, 10.0, 26.0, 30.0, 50.0])
    bnds = np.array([[-90, -40], [-40, 0], [0, 24], [24, 28], [28, 32], [32, 90]], dtype=float)
    path = write_cf(tmp_path / "irregular.nc", lat=lat, lat_bounds=bnds, dlon=10.0, years=1)
    grid = io.open_source(str(path))
    w = region_weights("tropics", grid).isel(lon=0).values
    def sin(deg):
        return np.sin(np.deg2rad(deg))

    expected_edge = (sin(30) - sin(28)) / (sin(32) - sin(28))  # equal-area share (common practice)
    np.testing.assert_allclose(w, [0.0, (sin(0) - sin(-30)) / (sin(0) - sin(-40)), 1.0, 1.0, expected_edge, 0.0], rtol=1e-12)
    assert expected_edge > 0.5  # the southern half of the cell has the larger area


def test_dateline_box_weights_match_a_hand_computation(odd_grid):
    lat_b, lon_b = odd_grid["lat_bnds"].values, odd_grid["lon_bnds"].values
    w = region_weights("box:-10,10,160,-150", odd_grid)
    # the arc from 160°E eastwards to 150°W is [160, 180] ∪ [-180, -150]
    expected = hand_fraction(lat_b, lon_b, -10, 10, [(160.0, 180.0), (-180.0, -150.0)])
    np.testing.assert_allclose(w.values, expected, rtol=1e-12, atol=1e-15)
    area = float((w * odd_grid["cell_area"]).sum())
    assert area == pytest.approx(zone_area(-10, 10, 160, 210), rel=1e-12)
    # cells of the grid's own area formula agree with the textbook one
    np.testing.assert_allclose(odd_grid["cell_area"].values, exact_area(lat_b, lon_b), rtol=1e-12)


@pytest.mark.parametrize("same", ["box:-10,10,160,210", "box:-10,10,160,-150", "BOX: -10, 10, 160, -150"])
def test_dateline_box_spellings_agree(odd_grid, same):
    np.testing.assert_allclose(region_weights(same, odd_grid).values, region_weights("box:-10,10,160,-150", odd_grid).values, atol=1e-15)


def test_box_that_does_not_cross_the_dateline(odd_grid):
    w = region_weights("box:30,60,-10,40", odd_grid)
    expected = hand_fraction(odd_grid["lat_bnds"].values, odd_grid["lon_bnds"].values, 30, 60, [(-10.0, 40.0)])
    np.testing.assert_allclose(w.values, expected, rtol=1e-12, atol=1e-15)


def test_box_on_a_0_360_file_selects_the_same_places(tmp_path):
    a = io.open_source(str(write_cf(tmp_path / "a.nc", dlat=4.5, years=1)))
    b = io.open_source(str(write_cf(tmp_path / "b.nc", dlat=4.5, years=1, lon_0_360=True, lat_descending=True)))
    wa, wb = region_weights("box:-10,10,160,-150", a), region_weights("box:-10,10,160,-150", b)
    np.testing.assert_allclose(wa.values, wb.values, atol=1e-15)
    np.testing.assert_allclose(wb["lon"].values, wa["lon"].values)


def test_land_and_ocean_from_a_given_fraction_sum_to_the_region(odd_grid):
    lat = odd_grid["lat"].values
    frac = odd_grid["cell_area"] * 0 + np.clip((lat[:, None] + 45.0) / 90.0, 0, 1)
    land = region_weights("land", odd_grid, land=frac)
    ocean = region_weights("ocean", odd_grid, land=frac)
    np.testing.assert_allclose(land.values, frac.values, atol=1e-15)
    np.testing.assert_allclose((land + ocean).values, 1.0, atol=1e-15)


def test_bundled_land_fraction_covers_about_29_percent(odd_grid):
    lf = land_fraction(odd_grid)
    share = float((lf * odd_grid["cell_area"]).sum() / odd_grid["cell_area"].sum())
    # land covers about 29 % of the Earth's surface (value from memory: 148.9 of 510.1 million km²)
    assert share == pytest.approx(148.9 / 510.1, abs=0.01)
    assert float(lf.min()) >= 0.0 and float(lf.max()) <= 1.0


def test_bundled_land_fraction_knows_a_desert_and_an_ocean(tmp_path):
    grid = io.open_source(str(write_cf(tmp_path / "g.nc", dlat=2.0, years=1)))
    lf = land_fraction(grid)
    # central Sahara and the equatorial Pacific (common knowledge)
    assert float(lf.sel(lat=23.0, lon=11.0)) > 0.99
    assert float(lf.sel(lat=1.0, lon=-151.0)) < 0.01
    # Antarctica around the pole is land
    assert float(lf.sel(lat=-89.0).mean()) > 0.99


@pytest.mark.parametrize(
    "text",
    ["mordor", "box:10,-10,0,20", "box:-10,10,20,20", "box:-95,10,0,20", "box:-10,10,0,400", "box:-10,10,0", "box:a,b,c,d"],
)
def test_bad_regions_are_input_errors(text):
    with pytest.raises(InputError) as err:
        parse_region(text)
    assert "\n" not in err.value.message and err.value.remedy


def test_region_ids_of_the_contract():
    # shared/DESIGN.md: global tropics nh-extratropics sh-extratropics arctic antarctic land ocean box:S,N,W,E
    assert list(REGIONS) == ["global", "tropics", "nh-extratropics", "sh-extratropics", "arctic", "antarctic", "land", "ocean"]
    assert parse_region("box:-10,10,160,-150").id == "box:-10,10,160,-150"
