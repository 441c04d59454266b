"""Values outside a variable's CF valid range are missing (cf-conventions 2.5.1), as the
netCDF library itself masks them; xarray does not, so gridscore applies the range.

The outside reference is netCDF4-python's automatic masking and unpacking
(``Dataset.set_auto_maskandscale``, on by default), which applies ``valid_range``,
``valid_min`` and ``valid_max`` to packed and plain variables as cf-conventions 8.1 says.
"""

from __future__ import annotations

import numpy as np
import pytest
import xarray as xr
from cfdata import netcdf_dataset

from evaluation import io
from evaluation.errors import InputError


def _write(path, values, attrs, encoding=None):
    lat = np.arange(-80.0, 81.0, 20.0)
    lon = np.arange(-170.0, 171.0, 20.0)
    ds = xr.Dataset(
        {"pr": (("time", "lat", "lon"), values, {"units": "mm day-1", "standard_name": "lwe_precipitation_rate", **attrs})},
        coords={
            "time": ("time", np.arange(values.shape[0]) * 30.0 + 15.0, {"units": "days since 2001-01-01", "calendar": "360_day"}),
            "lat": ("lat", lat, {"units": "degrees_north", "standard_name": "latitude"}),
            "lon": ("lon", lon, {"units": "degrees_east", "standard_name": "longitude"}),
        },
    )
    ds.to_netcdf(path, encoding={"pr": encoding or {}, "time": {"_FillValue": None}, "lat": {"_FillValue": None}, "lon": {"_FillValue": None}})
    return path


def _values():
    rng = np.random.default_rng(3)
    return rng.uniform(-100.0, 700.0, (12, 9, 18)).astype("float32")  # some below 0, some above 500


def _as_read(path):
    ds = io.open_source(str(path))
    return np.asarray(io.get_variable(ds, "pr").transpose("time", "lat", "lon").values, dtype="float64")


def _netcdf_library(path):
    with netcdf_dataset(path) as nc:  # masks and unpacks by default
        return np.ma.filled(nc["pr"][:].astype("float64"), np.nan)


@pytest.mark.parametrize(
    "attrs",
    [
        {"valid_range": np.array([0.0, 500.0], "float32")},
        {"valid_max": np.float32(500.0)},
        {"valid_min": np.float32(0.0)},
        {"valid_min": np.float32(0.0), "valid_max": np.float32(500.0)},
    ],
    ids=["valid_range", "valid_max", "valid_min", "both"],
)
def test_values_outside_the_valid_range_are_missing_as_the_netcdf_library_reads_them(tmp_path, attrs):
    path = _write(tmp_path / "p.nc", _values(), attrs)
    expected = _netcdf_library(path)
    assert np.isnan(expected).any() and not np.isnan(expected).all()  # the case is not empty
    np.testing.assert_allclose(_as_read(path), expected, rtol=0, atol=0, equal_nan=True)


def test_a_packed_variable_compares_its_range_as_packed_values(tmp_path):
    scale, offset = 0.05, 300.0
    valid = np.array([round((0.0 - offset) / scale), round((500.0 - offset) / scale)], "int16")  # 0 … 500 mm day-1, packed
    encoding = {"dtype": "int16", "scale_factor": scale, "add_offset": offset, "_FillValue": np.int16(-32767)}
    path = _write(tmp_path / "p.nc", _values(), {"valid_range": valid}, encoding)
    expected = _netcdf_library(path)
    assert np.isnan(expected).any() and not np.isnan(expected).all()
    np.testing.assert_allclose(_as_read(path), expected, rtol=1e-6, equal_nan=True)


def test_a_packed_variable_with_a_range_in_another_type_is_refused(tmp_path, capsys):
    """cf-conventions 8.1 wants the range in the packed type; the netCDF library compares the
    packed values with a range of any type (masking nearly every value here), older conventions
    read a float range as unpacked values: which one the writer meant cannot be told."""
    from app.cli import main

    encoding = {"dtype": "int16", "scale_factor": 0.05, "add_offset": 300.0, "_FillValue": np.int16(-32767)}
    path = _write(tmp_path / "p.nc", _values(), {"valid_range": np.array([0.0, 500.0], "float32")}, encoding)
    assert np.isnan(_netcdf_library(path)).mean() > 0.9  # the library's reading: packed values 0…500 only
    with pytest.raises(InputError, match="valid range"):
        _as_read(path)
    assert main(["score", "--reference", f"ref={path}", "--model", f"run={path}", "--variable", "pr", "--season", "JAN"]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "p.nc" in err[0] and "int16" in err[0] and "Traceback" not in err[0]
    assert main(["check", str(path)]) == 2
    assert "valid range" in capsys.readouterr().out


def test_the_mean_leaves_out_values_beyond_the_valid_range(tmp_path):
    import pandas as pd

    from app.cli import main

    values = np.full((12, 9, 18), 2.0, "float32")
    values[:, 4, 5] = 1e4  # a flagged value beyond valid_max in one cell
    path = _write(tmp_path / "p.nc", values, {"valid_max": np.float32(500.0)})
    out = tmp_path / "s.csv"
    assert main(["score", "--reference", f"ref={path}", "--model", f"run={path}", "--variable", "pr", "--season", "JAN", "--output", str(out)]) == 0
    table = pd.read_csv(out)
    # every valid cell holds 2.0: the area mean is 2.0 exactly when the flagged cell is left out (arithmetic)
    assert float(table.loc[table["metric"] == "mean", "value"].iloc[0]) == pytest.approx(2.0, rel=1e-12)
