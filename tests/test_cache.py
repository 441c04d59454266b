"""The persistent cache: hits, invalidation on a changed input, LRU eviction, and the
threaded and distributed engines giving the same numbers."""

from __future__ import annotations

import os
import time

import dask
import numpy as np
import pandas as pd
import pytest
import xarray as xr

from evaluation.cache import Cache
from evaluation.scoring import Comparison, Source


def _write(path, *, offset: float, seed: int, dlat: float = 10.0, years: int = 4) -> str:
    rng = np.random.default_rng(seed)
    time_ = xr.date_range("2001-01-01", periods=12 * years, freq="MS", calendar="noleap", use_cftime=True)
    lat = np.arange(-90 + dlat / 2, 90, dlat)
    lon = np.arange(dlat / 2, 360, dlat)
    data = 280 + 20 * np.cos(np.deg2rad(lat))[None, :, None] + offset + rng.normal(0, 1, (time_.size, lat.size, lon.size))
    ds = xr.Dataset(
        {"tas": (("time", "lat", "lon"), data, {"units": "K", "standard_name": "air_temperature"})},
        coords={
            "time": time_,
            "lat": ("lat", lat, {"standard_name": "latitude", "units": "degrees_north"}),
            "lon": ("lon", lon, {"standard_name": "longitude", "units": "degrees_east"}),
        },
    )
    ds.to_netcdf(path)
    return str(path)


@pytest.fixture
def sources(tmp_path):
    ref = Source("ref", "reference", (_write(tmp_path / "ref.nc", offset=0, seed=1),))
    run = Source("run", "model", (_write(tmp_path / "run.nc", offset=0.5, seed=2, dlat=15.0),))
    return ref, run


def _scores(ref, run, cache):
    cmp = Comparison(reference=ref, models=[run], variable="tas", cache=cache)
    return cmp.scores(regions=["global", "tropics"], seasons=["ANN", "DJF"])


def test_second_request_is_served_from_the_cache(sources, tmp_path, monkeypatch):
    ref, run = sources
    cache = Cache(tmp_path / "cache")
    first = _scores(ref, run, cache)
    n_entries = cache.info()["entries"]
    assert n_entries == 4  # two sources x two seasons, reduced once each
    stamps = {p: p.stat().st_mtime_ns for p in cache.entries()}
    time.sleep(0.01)

    def no_compute(*args, **kwargs):
        raise AssertionError("a cache hit must not compute from the data")

    # nor read the values from the files (sources that fit in memory are read without dask)
    from xarray.backends.netCDF4_ import NetCDF4ArrayWrapper

    original = NetCDF4ArrayWrapper._getitem

    def no_read(wrapper, key):
        if wrapper.variable_name == "tas":
            raise AssertionError("a cache hit must not read the data")
        return original(wrapper, key)

    monkeypatch.setattr(NetCDF4ArrayWrapper, "_getitem", no_read)
    with dask.config.set(scheduler=no_compute):
        second = _scores(ref, run, cache)
    pd.testing.assert_frame_equal(first, second)
    assert cache.info()["entries"] == n_entries
    # every entry was touched by the hit (LRU bookkeeping)
    assert all(p.stat().st_mtime_ns > stamps[p] for p in cache.entries())


def test_changed_input_invalidates_its_entries(sources, tmp_path):
    ref, run = sources
    cache = Cache(tmp_path / "cache")
    before = _scores(ref, run, cache)
    _write(run.paths[0], offset=1.5, seed=2, dlat=15.0)  # new content, new size/mtime
    os.utime(run.paths[0], (time.time() + 5, time.time() + 5))
    after = _scores(ref, run, cache)
    bias_before = before.query("metric == 'bias' and region == 'global' and season == 'ANN'").value.item()
    bias_after = after.query("metric == 'bias' and region == 'global' and season == 'ANN'").value.item()
    assert bias_after - bias_before == pytest.approx(1.0, abs=1e-6)  # the offset moved by 1 K
    assert cache.info()["entries"] == 6  # the run's two new reductions beside the old ones


def test_eviction_keeps_the_folder_within_its_bound(sources, tmp_path):
    ref, run = sources
    probe = Cache(tmp_path / "probe")
    _scores(ref, run, probe)
    sizes = sorted(p.stat().st_size for p in probe.entries())
    limit = sizes[-1] + sizes[-2] + 1  # room for about two entries
    small = Cache(tmp_path / "small", limit_bytes=limit)
    _scores(ref, run, small)
    info = small.info()
    assert info["size"] <= limit
    assert 1 <= info["entries"] < 4


def test_least_recently_used_entry_goes_first(tmp_path):
    cache = Cache(tmp_path / "c", limit_bytes=1e9)
    da = xr.DataArray(np.arange(1000.0), dims="x", name="v")
    for k in ("a", "b", "c"):
        cache.put(k, da)
    now = time.time()
    for i, k in enumerate(("a", "b", "c")):
        os.utime(cache.path / f"gs-{k}.nc", (now - 100 + i, now - 100 + i))
    assert cache.get("a") is not None  # "a" becomes the most recently used
    size = (cache.path / "gs-a.nc").stat().st_size
    cache.limit = 2 * size
    cache.evict()
    left = sorted(p.stem for p in cache.entries())
    assert left == ["gs-a", "gs-c"]


def test_score_tables_outlive_older_arrays_when_the_cache_is_full(tmp_path):
    cache = Cache(tmp_path / "c", limit_bytes=1e9)
    cache.put_json("table", {"rows": [1, 2, 3]})
    da = xr.DataArray(np.arange(1000.0), dims="x", name="v")
    for k in ("a", "b"):
        cache.put(k, da)
    now = time.time()
    os.utime(cache.path / "gs-table.json", (now - 300, now - 300))  # the table is the oldest entry
    size = (cache.path / "gs-a.nc").stat().st_size
    cache.limit = size + (cache.path / "gs-table.json").stat().st_size
    cache.evict()
    assert sorted(p.name for p in cache.entries()) == ["gs-b.nc", "gs-table.json"]
    assert cache.get_json("table") == {"rows": [1, 2, 3]}
    cache.limit = 1  # nothing fits: the table goes last, but it goes
    cache.evict()
    assert cache.entries() == []


def test_an_entry_written_in_the_background_is_served_at_once(tmp_path):
    cache = Cache(tmp_path / "c")
    values = np.random.default_rng(3).normal(size=(30, 90, 180))  # about 3.9 MB: the write takes a while
    da = xr.DataArray(values, dims=("year", "lat", "lon"), coords={"year": np.arange(1981, 2011)}, name="v")
    cache.put_later("k", da)
    back = cache.get("k")  # waits for the write of its own key
    assert back is not None
    np.testing.assert_array_equal(back.values, values)  # the values written, bit for bit (numpy)
    np.testing.assert_array_equal(back["year"].values, np.arange(1981, 2011))
    cache.put_later("k2", da.isel(year=slice(0, 2)))
    assert len(cache.entries()) == 2  # entries() waits for every pending write


@pytest.mark.parametrize(
    "coords",
    [
        {"year": np.array(["1991", "1992", "1993"])},  # text: not for scipy's classic writer
        {"year": np.array([2**40, 2**40 + 1, 2**40 + 2])},  # integers beyond 32 bits: neither
    ],
)
def test_the_background_writer_never_enters_the_netcdf_library(tmp_path, monkeypatch, coords):
    """netCDF-C/HDF5 is not safe from two threads at once (the netCDF-C documentation on
    thread safety; common practice): the process crashed when the main thread wrote test
    files while the writer thread wrote an entry through xarray's netCDF4 backend.  Entries
    that scipy's pure-Python writer cannot hold are written on the caller's thread."""
    import threading

    threads: list[str] = []
    real = xr.DataArray.to_netcdf

    def recording(self, *args, **kwargs):
        threads.append(threading.current_thread().name)
        return real(self, *args, **kwargs)

    monkeypatch.setattr(xr.DataArray, "to_netcdf", recording)
    cache = Cache(tmp_path / "c")
    da = xr.DataArray(np.arange(3.0), dims="year", coords=coords, name="v")
    cache.put_later("k", da)
    back = cache.get("k")
    assert back is not None
    np.testing.assert_array_equal(back.values, da.values)  # numpy equality
    assert threads and not any(t.startswith("gridscore-cache-writer") for t in threads), threads


def test_an_entry_put_while_the_process_ends_is_written_at_once(tmp_path, monkeypatch):
    """A server's background work may store an entry while the process ends and the writer
    no longer takes work (concurrent.futures refuses new work after shutdown)."""
    from concurrent.futures import ThreadPoolExecutor

    import evaluation.cache as cache_module

    ended = ThreadPoolExecutor(max_workers=1)
    ended.shutdown()
    monkeypatch.setattr(cache_module, "_writer", lambda: ended)
    cache = Cache(tmp_path / "c")
    da = xr.DataArray(np.arange(3.0), dims="year", coords={"year": np.arange(1991, 1994)}, name="v")
    cache.put_later("k", da)
    back = cache.get("k")
    assert back is not None
    np.testing.assert_array_equal(back.values, da.values)  # numpy equality


def test_clear_empties_the_folder(sources, tmp_path):
    ref, run = sources
    cache = Cache(tmp_path / "cache")
    _scores(ref, run, cache)
    assert cache.clear() == 4
    assert cache.info()["entries"] == 0


@pytest.mark.slow
def test_threaded_and_distributed_engines_agree(sources):
    from evaluation.engine import connect

    ref, run = sources
    threaded = _scores(ref, run, None)
    with connect(workers=2):
        distributed = _scores(ref, run, None)
    pd.testing.assert_frame_equal(threaded, distributed, rtol=1e-12)


@pytest.mark.slow
def test_dashboard_links_to_the_dask_dashboard_on_a_cluster(sources):
    from app.server import load_results
    from app.views.about import About
    from evaluation.engine import connect

    results = load_results(None)
    assert "dask dashboard" not in About(results=results)._pane.object  # threads: nothing to link
    with connect(workers=1) as client:
        text = About(results=results)._pane.object
        assert "dask dashboard" in text and client.dashboard_link in text
