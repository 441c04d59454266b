"""Scoring streams chunks: a collection larger than a dask worker's memory still scores."""

from __future__ import annotations

import numpy as np
import pytest
import xarray as xr

from evaluation.scoring import Comparison, Source

YEARS = 40
STEP = 0.5  # degrees: 720 x 360 cells, about 1 MB per month in float32


def _write_big(path, *, offset: float, calendar: str) -> int:
    time = xr.date_range("1981-01-01", periods=12 * YEARS, freq="MS", calendar=calendar, use_cftime=True)
    lat = np.arange(-90 + STEP / 2, 90, STEP)
    lon = np.arange(-180 + STEP / 2, 180, STEP)
    base = (280 + 25 * np.cos(np.deg2rad(lat)))[:, None] + 2 * np.sin(np.deg2rad(lon))[None, :]
    rng = np.random.default_rng(7)
    ds = xr.Dataset(
        coords={
            "time": time,
            "lat": ("lat", lat, {"standard_name": "latitude", "units": "degrees_north"}),
            "lon": ("lon", lon, {"standard_name": "longitude", "units": "degrees_east"}),
        }
    )
    ds["tas"] = (("time", "lat", "lon"), np.empty((time.size, lat.size, lon.size), dtype="float32"),
                 {"units": "K", "standard_name": "air_temperature"})
    for i in range(time.size):  # fill month by month: the test itself must not need the memory
        ds["tas"].values[i] = base + offset + rng.normal(0, 0.5, base.shape)
    ds.to_netcdf(path, encoding={"tas": {"chunksizes": (12, lat.size, lon.size)}})
    return int(ds["tas"].nbytes)


@pytest.mark.slow
def test_collection_larger_than_worker_memory_scores(tmp_path):
    from distributed import Client, LocalCluster

    nbytes = _write_big(tmp_path / "ref.nc", offset=0.0, calendar="standard")
    nbytes += _write_big(tmp_path / "run.nc", offset=0.75, calendar="noleap")
    limit = 600e6
    assert nbytes > 1.5 * limit  # the data cannot be held by the worker at once
    with LocalCluster(n_workers=1, threads_per_worker=2, memory_limit=limit, dashboard_address=":0") as cluster, Client(cluster) as client:
        before = set(client.scheduler_info()["workers"])
        cmp = Comparison(
            reference=Source("ref", "reference", (str(tmp_path / "ref.nc"),)),
            models=[Source("run", "model", (str(tmp_path / "run.nc"),))],
            variable="tas",
            cache=False,
        )
        table = cmp.scores(regions=["global"], seasons=["ANN"])
        # the worker that did the work is the one we started: it was never killed for memory
        assert set(client.scheduler_info()["workers"]) == before  # a restarted worker gets a new address
    bias = table.query("metric == 'bias'").value.item()
    assert bias == pytest.approx(0.75, abs=1e-3)  # the offset written into the run (common practice: bias = mean difference)
