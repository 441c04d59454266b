"""Tests of evaluation.io on real NetCDF files: coordinates found by CF attributes,
orientation and longitude convention, bounds and cell areas, calendars, bad files."""

from __future__ import annotations

import os

import cftime
import dask.array as dsa
import netCDF4
import numpy as np
import pytest
import xarray as xr
from cfdata import cf_dataset, exact_area, write_cf

from evaluation import io
from evaluation.errors import InputError


def raw(path) -> xr.Dataset:
    with xr.open_dataset(path, decode_times=False) as ds:
        return ds.load()


# ---------------------------------------------------------------------------- orientation


def test_descending_latitude_and_0_360_longitude_are_normalised(cf_file):
    path = cf_file("odd.nc", dlat=3.0, dlon=4.0, lat_descending=True, lon_0_360=True, years=1)
    ds = io.open_source(str(path))
    src = raw(path)
    assert np.all(np.diff(ds["lat"].values) > 0)
    assert np.all(np.diff(ds["lon"].values) > 0)
    assert ds["lon"].values.min() >= -180.0 and ds["lon"].values.max() < 180.0
    # every normalised cell holds the value the file stores at the same place
    for lat, lon in [(88.5, 2.0), (-88.5, 358.0), (1.5, 182.0), (-40.5, 178.0), (10.5, 250.0)]:
        expected = src["tas"].sel(lat=lat, lon=lon).isel(time=0).item()
        got = ds["tas"].sel(lat=lat, lon=((lon + 180) % 360) - 180).isel(time=0).compute().item()
        assert got == expected


def test_same_numbers_in_either_longitude_convention(cf_file):
    a = io.open_source(str(cf_file("a.nc", dlat=2.5, years=1)))
    b = io.open_source(str(cf_file("b.nc", dlat=2.5, years=1, lon_0_360=True, lat_descending=True)))
    np.testing.assert_array_equal(a["lat"].values, b["lat"].values)
    np.testing.assert_allclose(a["lon"].values, b["lon"].values, atol=1e-12)
    np.testing.assert_allclose(a["tas"].values, b["tas"].values, rtol=1e-6)
    np.testing.assert_allclose(a["lon_bnds"].values, b["lon_bnds"].values, atol=1e-12)
    np.testing.assert_allclose(a["cell_area"].values, b["cell_area"].values, rtol=1e-12)


def test_bounds_move_with_their_centre_across_the_wrap(cf_file):
    ds = io.open_source(str(cf_file("wrap.nc", lon=np.arange(0.0, 360.0, 2.5), dlat=10.0, years=1)))
    lon, b = ds["lon"].values, ds["lon_bnds"].values
    assert lon[0] == -180.0 and lon[-1] == 177.5
    np.testing.assert_allclose(b[:, 0], lon - 1.25)
    np.testing.assert_allclose(b[:, 1], lon + 1.25)
    assert ds["lat_bnds"].values[0, 0] == -90.0 and ds["lat_bnds"].values[-1, 1] == 90.0


# ---------------------------------------------------------------------------- coordinates by attributes


@pytest.mark.parametrize("identify_by", ["standard_name", "axis", "units", "all"])
def test_coordinates_are_found_by_attributes_not_names(cf_file, identify_by):
    path = cf_file("xy.nc", names={"lat": "y", "lon": "x", "time": "t"}, identify_by=identify_by, dlat=10.0, years=1)
    ds = io.open_source(str(path))
    assert set(ds["tas"].dims) == {"time", "lat", "lon"}
    assert ds.sizes["lat"] == 18 and ds.sizes["lon"] == 36 and ds.sizes["time"] == 12
    assert isinstance(ds["time"].values[0], cftime.datetime)


def test_names_alone_do_not_make_coordinates(cf_file):
    path = cf_file("bare.nc", identify_by="none", dlat=10.0, years=1)
    with pytest.raises(InputError, match="no latitude coordinate") as err:
        io.open_source(str(path))
    assert err.value.file == str(path) and err.value.remedy


def test_no_longitude_is_an_input_error(tmp_path):
    ds = cf_dataset(dlat=10.0, years=1)
    ds["lon"].attrs = {}
    path = tmp_path / "nolon.nc"
    ds.to_netcdf(path)
    with pytest.raises(InputError, match="no longitude coordinate"):
        io.open_source(str(path))


def test_a_field_without_time_opens_without_a_time_dimension(cf_file):
    ds = io.open_source(str(cf_file("fixed.nc", with_time=False, dlat=10.0)))
    assert "time" not in ds.dims and ds["tas"].dims == ("lat", "lon")


# ---------------------------------------------------------------------------- bounds and areas


def test_bounds_are_read_from_the_bounds_attribute(cf_file):
    lat = np.array([-60.0, -20.0, 10.0, 26.0, 30.0, 50.0])
    lat_b = np.array([[-90, -40], [-40, 0], [0, 24], [24, 28], [28, 32], [32, 90]], dtype=float)
    path = cf_file("irr.nc", lat=lat, lat_bounds=lat_b, dlon=30.0, years=1, bounds_names={"lat": "lat_edges", "lon": "lon_edges"})
    ds = io.open_source(str(path))
    np.testing.assert_array_equal(ds["lat_bnds"].values, lat_b)
    np.testing.assert_allclose(ds["cell_area"].values, exact_area(lat_b, ds["lon_bnds"].values), rtol=1e-13)


def test_bounds_of_a_descending_file_are_reversed_with_it(cf_file):
    lat = np.array([-60.0, -20.0, 10.0, 50.0])
    lat_b = np.array([[-90, -40], [-40, 0], [0, 24], [24, 90]], dtype=float)
    ds = io.open_source(str(cf_file("irr_desc.nc", lat=lat, lat_bounds=lat_b, lat_descending=True, dlon=30.0, years=1)))
    np.testing.assert_array_equal(ds["lat"].values, lat)
    np.testing.assert_array_equal(ds["lat_bnds"].values, lat_b)


def test_bounds_are_inferred_half_way_when_absent(cf_file):
    lat = np.array([-40.0, -20.0, 10.0, 26.0, 30.0, 50.0])
    ds = io.open_source(str(cf_file("nob.nc", lat=lat, bounds=False, dlon=30.0, years=1)))
    mid = (lat[:-1] + lat[1:]) / 2
    expected = np.stack([np.r_[-50.0, mid], np.r_[mid, 60.0]], axis=1)  # outer edges extrapolated by half a spacing
    np.testing.assert_allclose(ds["lat_bnds"].values, expected)
    np.testing.assert_allclose(ds["cell_area"].values, exact_area(expected, ds["lon_bnds"].values), rtol=1e-13)


def test_cell_areas_come_from_cell_measures_when_present(cf_file):
    grid = cf_dataset(dlat=10.0, dlon=20.0, years=1, lat_descending=True, lon_0_360=True)
    lat2, lon2 = np.meshgrid(grid["lat"].values, grid["lon"].values, indexing="ij")
    # a deliberately non-geometric area that identifies each cell: 1e9 * (1000 + lat) + lon
    area = 1e9 * (1000.0 + lat2) + lon2
    path = cf_file("area.nc", dlat=10.0, dlon=20.0, years=1, lat_descending=True, lon_0_360=True, cell_area=area)
    ds = io.open_source(str(path))
    lat, lon = np.meshgrid(ds["lat"].values, ds["lon"].values % 360.0, indexing="ij")
    np.testing.assert_allclose(ds["cell_area"].values, 1e9 * (1000.0 + lat) + lon, rtol=1e-15)


def test_exact_cell_areas_otherwise(cf_file):
    ds = io.open_source(str(cf_file("ex.nc", dlat=2.5, years=1)))
    # the sphere: 4πR², R = 6 371 km (textbook; IUGG mean radius, value from memory)
    assert float(ds["cell_area"].sum()) == pytest.approx(4 * np.pi * 6_371_000.0**2, rel=1e-12)


# ---------------------------------------------------------------------------- variables


def test_variable_found_by_standard_name(cf_file):
    ds = io.open_source(str(cf_file("sn.nc", variable="t2m_whatever", dlat=10.0, years=1)))
    da = io.get_variable(ds, "air_temperature")
    assert da.name == "air_temperature" and da.attrs["units"] == "K"


def test_absent_variable_lists_what_is_there(cf_file):
    path = cf_file("pr.nc", variable="pr", units="kg m-2 s-1", standard_name="precipitation_flux", dlat=10.0, years=1)
    with pytest.raises(InputError, match="no variable 'tas'.*variables found: pr") as err:
        io.open_source(str(path), variables=["tas"], source="run-a")
    assert err.value.file == str(path)
    ds = io.open_source(str(path))
    with pytest.raises(InputError, match="variables found: pr"):
        io.get_variable(ds, "psl")


def test_open_is_lazy(cf_file):
    ds = io.open_source(str(cf_file("lazy.nc", dlat=5.0, years=2)))
    assert isinstance(ds["tas"].data, dsa.Array)


def test_a_glob_of_yearly_files_is_one_source(tmp_path):
    for year in (2000, 2001, 2002):
        write_cf(tmp_path / f"tas_{year}.nc", start_year=year, years=1, dlat=10.0)
    write_cf(tmp_path / "pr_2000.nc", variable="pr", units="kg m-2 s-1", standard_name="precipitation_flux", start_year=2000, years=1, dlat=10.0)
    ds = io.open_source(str(tmp_path / "*.nc"), variables=["tas"])
    assert ds.sizes["time"] == 36 and "pr" not in ds.data_vars
    years = [t.year for t in ds["time"].values]
    assert years[0] == 2000 and years[-1] == 2002 and np.all(np.diff([t.year * 12 + t.month for t in ds["time"].values]) == 1)


def test_a_land_fraction_file_joins_the_source(tmp_path):
    write_cf(tmp_path / "tas.nc", dlat=10.0, years=1)
    ds = cf_dataset(dlat=10.0, with_time=False, land_fraction=lambda la, lo: (la > 0).astype(float))[["sftlf"]]
    ds.to_netcdf(tmp_path / "sftlf.nc")
    opened = io.open_source(str(tmp_path / "*.nc"), variables=["tas"])
    assert "sftlf" in opened.data_vars and opened["sftlf"].dims == ("lat", "lon")


# ---------------------------------------------------------------------------- calendars and time


@pytest.mark.parametrize("cal", ["standard", "gregorian", "proleptic_gregorian", "noleap", "365_day", "all_leap", "366_day", "360_day", "julian"])
def test_every_cf_calendar_decodes_to_cftime(cf_file, cal):
    ds = io.open_source(str(cf_file(f"{cal}.nc", calendar=cal, dlat=30.0, years=1, start_year=1999)))
    t = ds["time"].values
    assert all(isinstance(v, cftime.datetime) for v in t)
    assert [v.month for v in t] == list(range(1, 13)) and {v.year for v in t} == {1999}


def test_unknown_calendar_is_an_input_error(cf_file):
    path = cf_file("lunar.nc", calendar="lunar", dlat=30.0, years=1)
    with pytest.raises(InputError, match="calendar") as err:
        io.open_source(str(path))
    assert str(path) in err.value.message and err.value.remedy and "360_day" in err.value.remedy


def test_time_without_units_is_an_input_error(tmp_path):
    ds = cf_dataset(dlat=30.0, years=1)
    ds["time"].attrs = {"standard_name": "time"}
    path = tmp_path / "nounits.nc"
    ds.to_netcdf(path)
    with pytest.raises(InputError, match="time") as err:
        io.open_source(str(path))
    assert err.value.remedy


def test_repeated_time_steps_are_refused(cf_file):
    # three steps with the same stamp: no frequency can place them (daily data are read, see test_timecoding)
    path = cf_file("repeated.nc", months=[(2000, 1)] * 3, dlat=30.0)
    with pytest.raises(InputError, match="not increasing"):
        io.open_source(str(path))


# ---------------------------------------------------------------------------- bad files


def test_random_bytes_are_an_input_error(tmp_path):
    path = tmp_path / "noise.nc"
    path.write_bytes(np.random.default_rng(0).bytes(4096))
    with pytest.raises(InputError, match="cannot read") as err:
        io.open_source(str(path))
    assert err.value.file == str(path) and "\n" not in err.value.message


def test_truncated_file_is_an_input_error(cf_file, tmp_path):
    good = cf_file("good.nc", dlat=5.0, years=2)
    cut = tmp_path / "cut.nc"
    data = good.read_bytes()
    cut.write_bytes(data[: len(data) // 2])
    with pytest.raises(InputError) as err:
        ds = io.open_source(str(cut))
        ds["tas"].load()  # a reader may only notice when the data are read
    assert str(cut) in err.value.message


@pytest.mark.parametrize(("fmt", "unlimited"), [("NETCDF3_CLASSIC", None), ("NETCDF3_64BIT", ["time"])])
@pytest.mark.parametrize("keep", [0.5, 0.999])
def test_truncated_netcdf3_file_is_an_input_error(tmp_path, fmt, unlimited, keep):
    # netCDF-C reads the missing tail of a classic file as zeros without complaint: the
    # file must be refused, not scored
    ds = cf_dataset(dlat=10.0, years=2, bounds=False)
    ordered = xr.Dataset(coords={c: ds[c] for c in ("time", "lat", "lon")}, attrs=ds.attrs)
    ordered["tas"] = ds["tas"]  # coordinates first, the data last, as most writers do
    whole = tmp_path / "whole.nc"
    ordered.to_netcdf(whole, format=fmt, unlimited_dims=unlimited)
    cut = tmp_path / "cut.nc"
    cut.write_bytes(whole.read_bytes()[: int(whole.stat().st_size * keep)])
    with pytest.raises(InputError, match="truncated") as err:
        io.open_source(str(cut))
    assert err.value.file == str(cut)
    assert io.open_source(str(whole)).sizes["time"] == 24  # the complete file opens


def test_missing_file_and_empty_glob(tmp_path):
    with pytest.raises(InputError, match="file not found"):
        io.open_source(str(tmp_path / "nope.nc"))
    with pytest.raises(InputError, match="matches no file"):
        io.open_source(str(tmp_path / "*.nc"))
    with pytest.raises(InputError, match="folder"):
        io.open_source(str(tmp_path))


def test_file_identity(cf_file):
    path = cf_file("id.nc", dlat=30.0, years=1)
    ident = io.file_identity([str(path)])[0]
    assert ident.size == os.path.getsize(path) and ident.path == str(path)
    # the file is a real NetCDF4 file readable by netCDF4-python (reference reader)
    with netCDF4.Dataset(path) as nc:
        assert nc.variables["tas"].shape == (12, 6, 12)


# ---------------------------------------------------------------------------- reading without dask


@pytest.mark.parametrize("dtype, fill, packed", [("int8", -127, False), ("uint8", 255, False), ("int16", -32767, False),
                                                 ("int32", -999, False), ("int16", -32767, True), ("float32", 1e20, False)])
def test_the_size_that_decides_a_read_without_dask_is_not_below_the_decoded_size(tmp_path, monkeypatch, dtype, fill, packed):
    # xarray's CF decoding (the outside reference) turns integers with a _FillValue, and packed
    # values, into floats: an int8 value takes 4 bytes once read.  The size that decides whether
    # a source is read whole without dask must be at least that of the decoded values.
    ds = cf_dataset(dlat=6.0, years=2, dtype="float64")
    ds["tas"] = (ds["tas"] - 250.0).clip(0.0, 100.0).round()
    encoding = {n: {"_FillValue": None} for n in [*ds.coords, *(v for v in ds.data_vars if v != "tas")]}
    encoding["tas"] = {"dtype": dtype, "_FillValue": np.dtype(dtype).type(fill)}
    if packed:
        encoding["tas"].update(scale_factor=np.float32(0.01), add_offset=np.float32(0.0))
    path = tmp_path / f"{dtype}.nc"
    ds.to_netcdf(path, encoding=encoding)
    with xr.open_dataset(path) as back:
        decoded = back["tas"].nbytes
    listed = int(io._listing(str(path))["tas"]["bytes"])
    assert listed >= decoded
    # a limit between the stored size and the decoded size: the source keeps its dask chunks
    stored = ds["tas"].size * np.dtype(dtype).itemsize
    if stored < decoded:
        monkeypatch.setattr(io, "LOAD_LIMIT_BYTES", (stored + decoded) // 2)
        assert io.open_source(str(path), without_dask=True)["tas"].chunks is not None
    monkeypatch.setattr(io, "LOAD_LIMIT_BYTES", 4 * decoded)
    assert io.open_source(str(path), without_dask=True)["tas"].chunks is None  # small enough: no dask


def test_xarray_still_knows_dask_arrays_after_the_deferred_import() -> None:
    """evaluation.io answers xarray's "is this a dask array?" lazily through a private xarray
    cache: in a fresh process, a dask-backed DataArray must still be recognised as one by
    xarray's own checks (dask's public ``dask.array.Array`` as the reference), stay lazy
    through arithmetic, and compute the numpy result; a numpy DataArray must not import
    dask.array.  Fails when a new xarray changes how that cache is used."""
    import subprocess
    import sys

    code = """
import sys
import numpy as np
import xarray as xr
import evaluation.io  # noqa: F401  (the deferred import is installed here)
plain = xr.DataArray(np.arange(4.0), dims="x").assign_coords(x=np.arange(4))
assert "dask.array" not in sys.modules, "a numpy DataArray imported dask.array"
import dask.array as da
from xarray.namedarray.pycompat import is_chunked_array
from xarray.namedarray.utils import is_duck_dask_array
lazy = xr.DataArray(da.ones((4, 6), chunks=2), dims=("y", "x"))
assert is_duck_dask_array(lazy.data) and is_chunked_array(lazy.variable._data)
assert lazy.chunks == ((2, 2), (2, 2, 2))
summed = (lazy + 1).sum("x")
assert isinstance(summed.data, da.Array)
np.testing.assert_array_equal(summed.values, np.full(4, 12.0))
assert not is_duck_dask_array(plain.data)
print("ok")
"""
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=120)
    assert done.returncode == 0 and done.stdout.strip() == "ok", done.stderr[-2000:]
