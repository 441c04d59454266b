"""The common target grid: ``--target-grid reference|NAME|RES`` and the grids it builds;
grids that cannot be right are refused with the true reason."""

from __future__ import annotations

import numpy as np
import pytest
import xarray as xr
from cfdata import EARTH_RADIUS_M, write_cf
from gridfiles import write_rotated

from evaluation import grids, io
from evaluation.errors import InputError
from evaluation.grids.target import parse_target_grid, regular_grid, regular_near

SPHERE = 4 * np.pi * EARTH_RADIUS_M**2  # surface of a sphere (textbook)


def test_parse_target_grid():
    assert parse_target_grid(None, reference="era").source == "era"
    assert parse_target_grid("reference", reference="era").source == "era"
    assert parse_target_grid("run-b", sources=["era", "run-b"]).source == "run-b"
    choice = parse_target_grid("2.5x2.5")
    assert (choice.dlat, choice.dlon, choice.text) == (2.5, 2.5, "2.5x2.5")
    assert parse_target_grid(" 1X1 ").text == "1x1"
    with pytest.raises(InputError, match="unknown target grid 'nowhere'"):
        parse_target_grid("nowhere", sources=["era"])
    with pytest.raises(InputError, match="must divide 180"):
        parse_target_grid("0.7x0.7")
    with pytest.raises(InputError, match="must divide 180"):
        parse_target_grid("0x1")


@pytest.mark.parametrize(("dlat", "dlon"), [(2.5, 2.5), (1.0, 1.0), (0.5, 1.25), (3.0, 4.0)])
def test_regular_target_grids_tile_the_sphere_with_edges_on_multiples(dlat, dlon):
    g = regular_grid(dlat, dlon)
    assert g.sizes["lat"] == round(180 / dlat) and g.sizes["lon"] == round(360 / dlon)
    assert float(g["cell_area"].sum()) == pytest.approx(SPHERE, rel=1e-13)
    np.testing.assert_allclose((g["lat_bnds"].values + 90.0) / dlat, np.round((g["lat_bnds"].values + 90.0) / dlat), atol=1e-9)
    np.testing.assert_allclose((g["lon_bnds"].values + 180.0) / dlon, np.round((g["lon_bnds"].values + 180.0) / dlon), atol=1e-9)


def test_a_regular_grid_near_a_rotated_one_covers_its_cells(tmp_path):
    rlat, rlon = np.arange(-10.0, 10.01, 0.44), np.arange(-15.0, 12.01, 0.44)
    ds = io.open_source(str(write_rotated(tmp_path / "r.nc", rlat=rlat, rlon=rlon, pole_lat=39.25, pole_lon=-162.0, years=1)))
    near, spacing = regular_near(grids.grid_of(ds))
    assert spacing == pytest.approx(0.44, rel=0.05)  # √(mean area) of 0.44° cells, in degrees
    assert float(near["lat_bnds"].values[0, 1] - near["lat_bnds"].values[0, 0]) == 0.5
    assert float(near["lat_bnds"].min()) <= float(ds["lat_bnds"].min()) and float(near["lat_bnds"].max()) >= float(ds["lat_bnds"].max())
    assert float(near["lon_bnds"].min()) <= float(ds["lon_bnds"].min()) and float(near["lon_bnds"].max()) >= float(ds["lon_bnds"].max())


# ---------------------------------------------------------------------------- grids that cannot be right


def _broken(tmp_path, change) -> str:
    path = write_cf(tmp_path / "ok.nc", dlat=10.0, years=1)
    with xr.open_dataset(path, decode_times=False) as ds:
        ds = ds.load()
    ds = change(ds)
    ds.to_netcdf(tmp_path / "bad.nc")
    return str(tmp_path / "bad.nc")


def _without_bounds(ds):
    ds = ds.drop_vars([v for v in ("lat_bnds", "lon_bnds") if v in ds.variables])
    for name in ("lat", "lon"):
        ds[name].attrs.pop("bounds", None)
    return ds


def _set_lat(values):
    def change(ds):
        return ds.assign_coords(lat=("lat", values(ds["lat"].values.copy()), ds["lat"].attrs))

    return change


@pytest.mark.parametrize(
    ("change", "message"),
    [
        (_set_lat(lambda v: v * 2.0), "beyond ±90°"),
        (_set_lat(lambda v: np.where(np.arange(v.size) == 3, np.nan, v)), "missing"),
        (_set_lat(lambda v: np.where(np.arange(v.size) == 3, v[2], v)), "repeats a value"),
        # one cell whose extent the file does not give (no bounds): any inferred extent is a guess
        (lambda ds: _without_bounds(ds.isel(lat=[4], lon=[0])), "single cell"),
    ],
)
def test_grids_that_would_be_scored_wrongly_are_refused(tmp_path, change, message):
    with pytest.raises(InputError, match=message):
        io.open_source(_broken(tmp_path, change))


def test_a_single_cell_with_bounds_is_a_box_mean(tmp_path):
    # a series of box means (an index region) with its extent in CF bounds: the area is known
    # exactly (R² Δsin φ Δλ, the area of a latitude-longitude box), so it is read, not refused
    ds = io.open_source(_broken(tmp_path, lambda ds: ds.isel(lat=[4], lon=[0])))
    lat_b, lon_b = ds["lat_bnds"].values[0], ds["lon_bnds"].values[0]
    want = 6_371_000.0**2 * (np.sin(np.deg2rad(lat_b[1])) - np.sin(np.deg2rad(lat_b[0]))) * np.deg2rad(lon_b[1] - lon_b[0])
    assert float(ds["cell_area"].values.ravel()[0]) == pytest.approx(want, rel=1e-12)


def test_a_cyclic_longitude_column_is_refused(tmp_path):
    def cyclic(ds):
        return xr.concat([ds, ds.isel(lon=[0]).assign_coords(lon=ds["lon"].values[:1] + 360.0)], dim="lon", data_vars="minimal")

    with pytest.raises(InputError, match="repeats a value"):
        io.open_source(_broken(tmp_path, cyclic))


def test_the_cli_refuses_a_wrong_grid_with_exit_2(tmp_path):
    from app.cli import main

    bad = _broken(tmp_path, _set_lat(lambda v: v * 2.0))
    ref = str(write_cf(tmp_path / "ref.nc", dlat=10.0, years=1))
    assert main(["score", "--reference", ref, "--model", f"bad={bad}", "--variable", "tas"]) == 2


def test_cli_target_grid_is_named_in_the_provenance(tmp_path):
    import json

    from app.cli import main

    ref = str(write_cf(tmp_path / "ref.nc", dlat=4.0, years=1))
    run = str(write_cf(tmp_path / "run.nc", dlat=3.0, years=1, offset=1.0))
    out = tmp_path / "s.json"
    assert main(["score", "--reference", ref, "--model", f"run={run}", "--variable", "tas", "--target-grid", "5x5", "--season", "JAN", "--output", str(out)]) == 0
    prov = json.loads(out.read_text())["provenance"]
    assert prov["target_grid"] == "global regular 5° x 5° grid"
    assert prov["remapping"]["run"].startswith("regular grid: first-order conservative")
    assert main(["score", "--reference", ref, "--model", f"run={run}", "--variable", "tas", "--target-grid", "0.7x0.7"]) == 2
    assert main(["score", "--reference", ref, "--model", f"run={run}", "--variable", "tas", "--target-grid", "run", "--season", "JAN", "--output", str(out)]) == 0
    assert json.loads(out.read_text())["provenance"]["target_grid"] == "grid of 'run' (regular 60x120)"


def test_manifest_target_grid(tmp_path):
    from evaluation.catalog import Collection

    write_cf(tmp_path / "ref.nc", dlat=10.0, years=1)
    body = '[[source]]\nname = "ref"\nrole = "reference"\npaths = ["ref.nc"]\n'
    (tmp_path / "manifest.toml").write_text('target_grid = "2.5x2.5"\n' + body)
    assert Collection.from_path(tmp_path).target_grid == "2.5x2.5"
    (tmp_path / "manifest.toml").write_text('target_grid = "ref"\n' + body)
    assert Collection.from_path(tmp_path).target_grid == "ref"
    (tmp_path / "manifest.toml").write_text(body)
    assert Collection.from_path(tmp_path).target_grid == "reference"
    (tmp_path / "manifest.toml").write_text('target_grid = "7x7"\n' + body)
    with pytest.raises(InputError, match="target_grid: .*must divide 180"):
        Collection.from_path(tmp_path)
