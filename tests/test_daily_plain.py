"""Daily input of one file opened without dask: the monthly means are made as the months
are read (evaluation.timecoding.MonthlyMeans), and equal pandas' monthly means of the
same daily values (``DataFrame.resample("MS").mean()``), whatever the block size and
whichever months are read."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from timefiles import write_raw

from evaluation import io

DAYS = pd.date_range("2001-01-01", "2002-03-15", freq="D")  # March 2002 incomplete: left out
COMPLETE = 14  # January 2001 ... February 2002


@pytest.fixture(scope="module")
def daily(tmp_path_factory):
    rng = np.random.default_rng(2)
    data = 280.0 + 5.0 * rng.standard_normal((DAYS.size, 3, 4))
    data[40, 1, 2] = np.nan  # 10 February 2001 at one cell: that cell has no February 2001 mean
    path = write_raw(tmp_path_factory.mktemp("daily") / "tas_daily.nc", np.arange(DAYS.size, dtype="float64"),
                     {"units": "days since 2001-01-01", "calendar": "standard", "standard_name": "time", "axis": "T"}, data)
    # pandas' calendar months of the same values (pandas.DataFrame.resample, month starts)
    expected = pd.DataFrame(data.reshape(DAYS.size, -1), index=DAYS).resample("MS").mean().to_numpy()[:COMPLETE]
    return str(path), expected


def _opened(path: str):
    da = io.open_source(path, variables=["tas"], without_dask=True)["tas"]
    assert da.chunks is None  # no dask
    return da.transpose("time", "lat", "lon")


@pytest.mark.parametrize("chunk_mb", ["64", "0.0001"])  # all months in one block; one month a block
def test_monthly_means_of_daily_values_equal_pandas(daily, monkeypatch, chunk_mb: str) -> None:
    path, expected = daily
    monkeypatch.setenv("GRIDSCORE_CHUNK_MB", chunk_mb)
    got, expected = _opened(path).values.reshape(COMPLETE, -1).copy(), expected.copy()
    nan_cell = 1 * 4 + 2
    assert np.isnan(got[1, nan_cell])  # a missing day leaves its month missing (no partial means)
    got[1, nan_cell] = expected[1, nan_cell] = 0.0  # pandas skips the NaN day
    np.testing.assert_allclose(got, expected, rtol=1e-13, atol=0)


def test_only_the_months_asked_for_are_made(daily, monkeypatch) -> None:
    path, expected = daily
    monkeypatch.setenv("GRIDSCORE_CHUNK_MB", "0.0001")
    da = _opened(path)
    np.testing.assert_allclose(da.isel(time=slice(3, 9)).values.reshape(6, -1), expected[3:9], rtol=1e-13, atol=0)
    np.testing.assert_allclose(da.isel(time=[2, 5, 11]).values.reshape(3, -1), expected[[2, 5, 11]], rtol=1e-13, atol=0)
    assert float(da.isel(time=12, lat=0, lon=3)) == pytest.approx(expected[12, 3], rel=1e-13)


def test_steps_weighted_by_their_bounds_equal_pandas(tmp_path) -> None:
    # twice a day, each step 0.5 days long by its bounds: the weighted path
    steps = pd.date_range("2003-01-01", "2003-04-01", freq="12h", inclusive="left")
    rng = np.random.default_rng(8)
    data = 250.0 + 10.0 * rng.standard_normal((steps.size, 3, 4))
    t = np.arange(steps.size) * 0.5
    path = write_raw(tmp_path / "tas_12h.nc", t, {"units": "days since 2003-01-01", "calendar": "standard", "standard_name": "time", "axis": "T"},
                     data, bounds=np.stack([t, t + 0.5], axis=1))
    # pandas.DataFrame.resample: equal steps, so the weighted mean is the plain mean
    expected = pd.DataFrame(data.reshape(steps.size, -1), index=steps).resample("MS").mean().to_numpy()
    np.testing.assert_allclose(_opened(str(path)).values.reshape(3, -1), expected, rtol=1e-13, atol=0)


def _pandas_complete_months(data: np.ndarray, days: pd.DatetimeIndex) -> np.ndarray:
    """pandas' calendar-month means (DataFrame.resample, month starts) of the months whose every
    day is present: a month missing a day has no exact mean and is left out."""
    frame = pd.DataFrame(data.reshape(days.size, -1), index=days)
    counts = frame.resample("MS").size()
    complete = counts.to_numpy() == counts.index.days_in_month.to_numpy()
    return frame.resample("MS").mean().to_numpy()[complete]


@pytest.mark.parametrize("chunk_mb", ["64", "0.0001"])
def test_a_missing_day_mid_series_leaves_its_month_out_and_the_others_are_read_month_by_month(tmp_path, monkeypatch, chunk_mb) -> None:
    """One day missing in July 2001: the complete months are no longer one unbroken run of
    steps, yet each is still read on its own (the steps read are counted), not every day at once."""
    from evaluation import timecoding

    monkeypatch.setenv("GRIDSCORE_CHUNK_MB", chunk_mb)
    all_days = pd.date_range("2001-01-01", "2004-12-31", freq="D")
    keep = all_days != pd.Timestamp("2001-07-20")
    days = all_days[keep]
    data = 280.0 + 5.0 * np.random.default_rng(21).standard_normal((days.size, 3, 4))
    t = (days - pd.Timestamp("2001-01-01")).days.to_numpy().astype("float64")
    path = write_raw(tmp_path / "tas_gap.nc", t, {"units": "days since 2001-01-01", "calendar": "standard", "standard_name": "time", "axis": "T"}, data)
    expected = _pandas_complete_months(data, days)
    assert expected.shape[0] == 47  # 48 months, July 2001 left out
    steps_read = []
    original = timecoding.MonthlyMeans._months
    monkeypatch.setattr(timecoding.MonthlyMeans, "_months",
                        lambda self, months, other: steps_read.append(int(self.ends[months[-1]] - self.starts[months[0]])) or original(self, months, other))
    da = _opened(str(path))
    np.testing.assert_allclose(da.values.reshape(47, -1), expected, rtol=1e-13, atol=0)
    assert sum(steps_read) <= days.size  # every day read at most once (July 2001's 30 days perhaps with its neighbours)
    steps_read.clear()
    one_year = da.isel(time=slice(20, 32)).values  # 2002-10 ... 2003-09: only these months' days
    np.testing.assert_allclose(one_year.reshape(12, -1), expected[20:32], rtol=1e-13, atol=0)
    assert sum(steps_read) == (pd.Timestamp("2003-10-01") - pd.Timestamp("2002-10-01")).days


@pytest.mark.parametrize("chunk_mb", ["64", "0.0001"])
@pytest.mark.parametrize("without_dask", [True, False], ids=["no-dask", "dask"])
def test_steps_of_unequal_length_are_weighted_by_their_bounds(tmp_path, monkeypatch, chunk_mb, without_dask) -> None:
    # steps of 6 h and 18 h in turn, their lengths from time bounds: each month's mean weights
    # every value by its step's length (numpy.average with those weights over pandas' calendar months)
    monkeypatch.setenv("GRIDSCORE_CHUNK_MB", chunk_mb)
    lengths = np.tile([0.25, 0.75], 180)  # 180 days: 2003-01-01 ... 2003-06-29
    edges = np.r_[0.0, np.cumsum(lengths)]
    t = (edges[:-1] + edges[1:]) / 2
    data = 250.0 + 10.0 * np.random.default_rng(5).standard_normal((t.size, 3, 4))
    path = write_raw(tmp_path / "tas_uneq.nc", t, {"units": "days since 2003-01-01", "calendar": "standard", "standard_name": "time", "axis": "T"},
                     data, bounds=np.stack([edges[:-1], edges[1:]], axis=1))
    month = (pd.Timestamp("2003-01-01") + pd.to_timedelta(t, unit="D")).to_period("M")
    expected = np.array([np.average(data[month == m].reshape(int((month == m).sum()), -1), axis=0, weights=lengths[month == m])
                         for m in pd.unique(month)])[:5]  # January ... May complete; June lacks its last day
    da = io.open_source(str(path), variables=["tas"], without_dask=without_dask)["tas"].transpose("time", "lat", "lon")
    assert (da.chunks is None) == without_dask
    np.testing.assert_allclose(da.values.reshape(-1, 12), expected, rtol=1e-13, atol=0)
    np.testing.assert_allclose(da.isel(time=slice(None, None, 2)).values.reshape(-1, 12), expected[::2], rtol=1e-13, atol=0)


def test_a_daily_file_that_completes_no_month_is_refused_in_one_line(tmp_path, capsys) -> None:
    from app.cli import main

    path = write_raw(tmp_path / "tas_20d.nc", np.arange(20.0) + 0.5, {"units": "days since 2001-01-01", "calendar": "standard"},
                     np.zeros((20, 3, 4)))
    assert io.open_source(str(path), without_dask=True)["tas"].sizes["time"] == 0  # no month to mean (no exception)
    assert main(["score", "--reference", f"ref={path}", "--model", f"run={path}", "--variable", "tas", "--output", str(tmp_path / "s.csv")]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "tas_20d.nc" in err[0] and "Traceback" not in err[0]


def test_steps_still_in_the_file_out_of_month_order_are_reduced_by_dask_chunks(tmp_path) -> None:
    """to_monthly given lazily read steps whose months are not each one run (here February's
    days before January's; open_source refuses such a file, other callers may not): a month of
    steps a dask chunk, not every step in float64 at once; the means still equal pandas'."""
    import xarray as xr

    from evaluation import timecoding

    days = pd.date_range("2001-01-01", "2001-02-28", freq="D")
    data = 280.0 + np.random.default_rng(4).standard_normal((days.size, 3, 4))
    order = np.r_[np.arange(31, days.size), np.arange(31)]  # February, then January
    t = (days - days[0]).days.to_numpy().astype("float64")[order]
    path = write_raw(tmp_path / "tas_swapped.nc", t, {"units": "days since 2001-01-01", "calendar": "standard"}, data[order])
    with xr.open_dataset(path, decode_times=False) as raw:
        decoded = timecoding.decode(raw)
        assert decoded["tas"].chunks is None and not decoded["tas"].variable._in_memory
        out = timecoding.to_monthly(decoded)["tas"]
        assert out.chunks is not None  # dask, a month a chunk
        expected = pd.DataFrame(data.reshape(days.size, -1), index=days).resample("MS").mean().to_numpy()  # pandas' monthly means
        np.testing.assert_allclose(out.values.reshape(2, -1), expected, rtol=1e-13, atol=0)
