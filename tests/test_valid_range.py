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


def _netcdf_library(path, name="pr"):
    with netcdf_dataset(path) as nc:  # masks and unpacks by default
        return np.ma.filled(nc[name][:].astype("float64"), np.nan)


@pytest.mark.parametrize(
    "attrs",
    [
        {"valid_range": np.array([0.0, 500.0], "float32")},
        {"valid_max": np.float32(500.0)},
        {"valid_min": np.float32(0.0)},
        {"valid_min": np.float32(0.0), "valid_max": np.float32(500.0)},
        {"valid_range": np.array([0.0, 500.0], "float32"), "valid_max": np.float32(300.0)},  # the range wins
    ],
    ids=["valid_range", "valid_max", "valid_min", "both", "range-and-max"],
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


# Daily steps: the range applies to each day as the netCDF library reads it, and the monthly
# means follow from the masked days (a month with a missing day is missing in that cell, the
# rule of evaluation.timecoding.to_monthly), for a plain and a packed variable.

DAILY = 365 * 2  # 2001-2002, noleap calendar


def _write_daily(path, values, attrs, encoding=None, name="pr", time=None):
    time = np.arange(values.shape[0]) + 0.5 if time is None else time
    ds = xr.Dataset(
        {name: (("time", "lat", "lon"), values, {"units": "mm day-1", "standard_name": "lwe_precipitation_rate", **attrs})},
        coords={
            "time": ("time", time, {"units": "days since 2001-01-01", "calendar": "noleap"}),
            "lat": ("lat", [-60.0, -20.0, 20.0, 60.0], {"units": "degrees_north", "standard_name": "latitude"}),
            "lon": ("lon", np.arange(6) * 60.0 - 150.0, {"units": "degrees_east", "standard_name": "longitude"}),
        },
    )
    ds.to_netcdf(path, encoding={name: encoding or {}, "time": {"_FillValue": None}, "lat": {"_FillValue": None}, "lon": {"_FillValue": None}})
    return path


def _netcdf_library_monthly(path, name="pr"):
    """netCDF4-python's masked and unpacked days, then pandas' calendar-month means, a month
    missing in a cell where any of its days is (DataFrame.resample('MS') mean and count)."""
    import pandas as pd

    x = _netcdf_library(path, name)
    days = pd.date_range("2001-01-01", "2002-12-31", freq="D")
    days = days[~((days.month == 2) & (days.day == 29))]  # noleap (no 29 February in 2001-2002 anyway)
    frame = pd.DataFrame(x.reshape(x.shape[0], -1), index=days[: x.shape[0]])
    months = frame.resample("MS")
    full = months.count().eq(months.size(), axis=0)
    return months.mean().where(full).to_numpy().reshape(-1, *x.shape[1:])


def _daily_values():
    rng = np.random.default_rng(11)
    values = rng.uniform(0.0, 400.0, (DAILY, 4, 6)).astype("float32")
    values[10, 0, 0] = 1340.0  # a day beyond the range in January 2001
    values[40, 1, 1] = 1340.0  # February 2001
    values[100, 2, 2] = -50.0  # April 2001
    return values


@pytest.mark.parametrize("without_dask", [True, False], ids=["no-dask", "dask"])
def test_daily_values_outside_the_range_are_missing_before_the_monthly_means(tmp_path, without_dask):
    path = _write_daily(tmp_path / "pr_day.nc", _daily_values(), {"valid_range": np.array([0.0, 500.0], "float32")})
    expected = _netcdf_library_monthly(path)
    assert np.isnan(expected).sum() == 3  # the three months holding a day beyond the range
    da = io.get_variable(io.open_source(str(path), without_dask=without_dask), "pr").transpose("time", "lat", "lon")
    assert (da.chunks is None) == without_dask
    np.testing.assert_allclose(np.asarray(da.values, "float64"), expected, rtol=1e-12, atol=0, equal_nan=True)


@pytest.mark.parametrize("without_dask", [True, False], ids=["no-dask", "dask"])
def test_a_packed_daily_variable_is_masked_with_its_packed_range(tmp_path, without_dask):
    # int16, scale_factor 2: the packed range 0 ... 3000 is 0 ... 6000 m; physical monthly means near
    # 3500 m lie above the packed number 3000 and must stay, days of 7000 m (packed 3500) must go
    values = np.random.default_rng(12).uniform(2000.0, 5000.0, (DAILY, 4, 6))
    values[15, 3, 5] = values[400, 0, 2] = 7000.0
    encoding = {"dtype": "int16", "scale_factor": 2.0, "add_offset": 0.0, "_FillValue": np.int16(-32767)}
    path = _write_daily(tmp_path / "zg_day.nc", values, {"units": "m", "standard_name": "geopotential_height", "valid_range": np.array([0, 3000], "int16")}, encoding, name="zg")
    expected = _netcdf_library_monthly(path, "zg")
    assert np.isnan(expected).sum() == 2 and np.nanmean(expected) > 3000.0
    da = io.get_variable(io.open_source(str(path), without_dask=without_dask), "zg").transpose("time", "lat", "lon")
    np.testing.assert_allclose(np.asarray(da.values, "float64"), expected, rtol=1e-12, atol=0, equal_nan=True)


def test_a_packed_daily_variable_with_a_range_in_another_type_is_refused(tmp_path, capsys):
    from app.cli import main

    values = np.random.default_rng(13).uniform(0.0, 400.0, (DAILY, 4, 6))
    encoding = {"dtype": "int16", "scale_factor": 0.05, "add_offset": 300.0, "_FillValue": np.int16(-32767)}
    path = _write_daily(tmp_path / "pr_day.nc", values, {"valid_range": np.array([0.0, 500.0], "float32")}, encoding)
    assert main(["score", "--reference", f"ref={path}", "--model", f"run={path}", "--variable", "pr", "--season", "JAN"]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "pr_day.nc" in err[0] and "int16" in err[0] and "Traceback" not in err[0]
    assert main(["check", str(path)]) == 2
    assert "valid range" in capsys.readouterr().out


@pytest.mark.parametrize("kind", ["daily", "monthly"])
def test_with_a_range_only_the_months_of_the_period_are_read(tmp_path, monkeypatch, kind):
    """One year of five read: 12 months of daily steps made into means, or 12 monthly steps
    (counted where the masked values are read), not the whole file."""
    from evaluation import timecoding

    read = []
    if kind == "daily":
        steps, time = 365 * 5, np.arange(365 * 5) + 0.5
        original = timecoding.MonthlyMeans._months
        monkeypatch.setattr(timecoding.MonthlyMeans, "_months", lambda self, months, other: read.extend(months) or original(self, months, other))
    else:
        steps, time = 60, np.arange(60) * 365 / 12 + 15.0
        original = io._WithinRange._read
        monkeypatch.setattr(io._WithinRange, "_read", lambda self, key: (lambda out: read.extend(range(out.shape[0])) or out)(original(self, key)))
    values = np.random.default_rng(14).uniform(0.0, 400.0, (steps, 4, 6)).astype("float32")
    path = _write_daily(tmp_path / "pr.nc", values, {"valid_range": np.array([0.0, 500.0], "float32")}, time=time)
    da = io.get_variable(io.open_source(str(path), without_dask=True), "pr")
    assert da.chunks is None and read == []  # nothing read yet
    year = da.sel(time=slice("2003-01", "2003-12")).values
    assert year.shape[0] == 12
    assert len(read) == 12


@pytest.mark.parametrize(
    "attrs, key, below_zero_masked",
    [
        ({"valid_min": "abc"}, "valid_min", False),
        ({"valid_max": "500"}, "valid_max", False),  # text holding a number is not applied either
        ({"valid_range": "0 500"}, "valid_range", False),
        ({"valid_max": np.float32(np.nan)}, "valid_max", False),
        ({"valid_range": np.array([0.0, np.nan], "float32")}, "valid_range", True),  # the lowest end still applies
        ({"valid_range": np.array([0.0, 1.0, 500.0], "float32")}, "valid_range", False),
    ],
    ids=["text-min", "text-number", "text-range", "nan-max", "nan-end", "three-values"],
)
def test_a_limit_the_netcdf_library_does_not_apply_is_not_applied_and_check_notes_it(tmp_path, capsys, attrs, key, below_zero_masked):
    """netCDF4-python applies no text limit ("not used since it cannot be safely cast", a
    UserWarning), masks nothing beyond a NaN limit (no comparison with NaN is true) and uses
    valid_range only when it has two values: gridscore reads such files as the library does."""
    from app.cli import main

    path = _write(tmp_path / "p.nc", _values(), attrs)
    with pytest.warns(UserWarning) if isinstance(attrs[key], str) else _no_warning():
        expected = _netcdf_library(path)
    # nothing masked beyond 500 (values lie there); below 0 only where the range's lowest end is a number
    below = _values() < 0
    assert (expected > 500).any() and np.array_equal(np.isnan(expected), below & below_zero_masked)
    np.testing.assert_array_equal(_as_read(path), expected)
    assert main(["check", str(path)]) == 0
    out = capsys.readouterr().out.splitlines()
    assert len([line for line in out if key in line and ("not applied" in line or "NaN" in line)]) == 1
    assert main(["score", "--reference", f"ref={path}", "--model", f"run={path}", "--variable", "pr", "--season", "JAN",
                 "--output", str(tmp_path / "s.csv")]) == 0
    assert "Traceback" not in capsys.readouterr().err


def _no_warning():
    import contextlib

    return contextlib.nullcontext()


def test_an_inverted_range_masks_every_value_and_check_says_so(tmp_path, capsys):
    from app.cli import main

    path = _write(tmp_path / "p.nc", _values(), {"valid_range": np.array([500.0, 0.0], "float32")})
    expected = _netcdf_library(path)
    assert np.isnan(expected).all()  # netCDF4-python: below 500 or above 0 is every value
    np.testing.assert_array_equal(_as_read(path), expected)
    assert main(["check", str(path)]) == 0
    assert sum("every value is read as missing" in line for line in capsys.readouterr().out.splitlines()) == 1
