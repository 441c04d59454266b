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
