"""The fast paths of issue 14 give what the general paths give.

* season means of data in memory (numpy, no dask graph) against month-length weighted
  means computed by hand with cftime's calendars (common practice; WMO season labels);
* the table a warm ``gridscore score`` writes from the cache with the standard library
  only, byte for byte against pandas' CSV writer and the json module through
  :func:`evaluation.export.table_bytes`, and read back to identical doubles by
  ``pandas.read_csv``;
* a warm command imports neither numpy, pandas nor xarray.

Speed itself is measured in benchmarks/run.py, not here.
"""

from __future__ import annotations

import io
import json
import math
import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from cfdata import hand_season_means, read_monthly, write_cf

from evaluation import export, plainfiles
from evaluation import io as gio
from evaluation.timeaxis import season_means

HERE = Path(__file__).resolve().parent


def _nan_in_one_month(lat, lon):
    return (np.abs(lat) < 12) & (lon > 100)  # a patch that is missing in every month


@pytest.mark.parametrize("calendar", ["noleap", "360_day", "standard"])
@pytest.mark.parametrize("season", ["ANN", "DJF", "JJA", "FEB"])
def test_season_means_in_memory_match_hand_means(tmp_path, calendar, season):
    path = write_cf(tmp_path / "a.nc", dlat=15.0, start_year=1990, years=5, calendar=calendar, nan_mask=_nan_in_one_month)
    lazy = gio.get_variable(gio.open_source([str(path)]), "tas")
    loaded = lazy.compute()
    assert loaded.chunks is None and lazy.chunks is not None
    fast = season_means(loaded, season, "1991-1994")
    general = season_means(lazy, season, "1991-1994").compute()
    values, steps, cal, raw = read_monthly(path, "tas")
    hand = hand_season_means(values, steps, cal, season, 1991, 1994)  # cftime month lengths, by hand
    assert fast.dims == general.dims and fast.attrs == general.attrs and fast.name == general.name
    assert fast["year"].values.tolist() == sorted(hand)
    for year, expected in hand.items():
        # the file is stored south to north as the package keeps it
        np.testing.assert_allclose(fast.sel(year=year).values, expected, rtol=1e-13, atol=0, equal_nan=True)
    np.testing.assert_allclose(fast.values, general.values, rtol=1e-13, atol=0, equal_nan=True)
    assert np.isnan(fast.values).any()  # the missing patch stays missing (no partial means)


def _awkward_table() -> pd.DataFrame:
    rows = [
        ("run-a", "obs", "tas", "", "global", "ANN", "1981-2010", "bias", 0.1 + 0.2, "K"),
        ("=cmd|' /C calc'!A0", "obs", "tas", "", "land", "DJF", "1981-2010", "rmse", float("nan"), "K"),
        ("run, with comma", 'say "hi"', "tas", "850 hPa", "box:-5,5,160,-150", "JJA", "1981-2010", "corr", -1e-300, ""),
        ("multi\nline", "obs", "pr", "", "ocean", "SON", "1981-2010", "trend", 123456789.123456789, "mm day-1/decade"),
        ("-neg", "+plus", "tas", "", "global", "JAN", "1981-2010", "trend_pvalue", 5e-324, "1"),
        ("run-b", "obs", "tas", "", "global", "ANN", "1981-2010", "mean", 3.0, "K"),
    ]
    return pd.DataFrame(rows, columns=list(export.TIDY_COLUMNS))


@pytest.mark.parametrize("fmt", ["csv", "json"])
def test_plain_table_bytes_equal_the_pandas_writer(fmt):
    table = _awkward_table()
    record = {"variable": "tas", "period": "1981-2010", "sources": [{"name": "=x", "files": ["a.nc"]}]}
    columns = {c: table[c].tolist() for c in export.TIDY_COLUMNS}
    # the cache holds the table as JSON: the plain writer gets what json gives back
    columns = json.loads(json.dumps(columns))
    assert plainfiles.tidy_bytes(columns, fmt, provenance=record) == export.table_bytes(table, fmt, provenance=record)


def test_plain_csv_reads_back_to_the_same_doubles():
    table = _awkward_table()
    data = plainfiles.tidy_bytes({c: table[c].tolist() for c in export.TIDY_COLUMNS}, "csv", provenance=None)
    back = pd.read_csv(io.BytesIO(data), keep_default_na=False, na_values=[""], dtype={"value": "float64"})
    for a, b in zip(back["value"], table["value"], strict=True):
        assert (math.isnan(a) and math.isnan(b)) or a == b  # repr() round-trips a double exactly (Python docs)
    assert back["model"].iloc[1].startswith("'=")  # OWASP: a formula is written as text


def test_warm_score_imports_no_array_library_and_writes_the_same_files(tmp_path):
    ref = write_cf(tmp_path / "ref.nc", dlat=15.0, start_year=1990, years=4)
    run = write_cf(tmp_path / "run.nc", dlat=15.0, start_year=1990, years=4, offset=0.5)
    args = ["score", "--reference", f"obs={ref}", "--model", f"run={run}", "--variable", "tas", "--region", "global",
            "--region", "land", "--season", "ANN", "--season", "DJF"]
    probe = (
        "import sys; from app.cli import main; rc = main(sys.argv[1:]); "
        "print('LOADED', [m for m in ('numpy', 'pandas', 'xarray', 'dask') if m in sys.modules]); sys.exit(rc)"
    )
    outputs = {}
    for suffix in ("csv", "json"):
        env = {**os.environ, "GRIDSCORE_CACHE": str(tmp_path / f"cache-{suffix}")}  # a cold start per format
        env.pop("GRIDSCORE_DEBUG", None)
        for name in ("cold", "warm"):
            out = tmp_path / f"{name}.{suffix}"
            p = subprocess.run([sys.executable, "-c", probe, *args, "--output", str(out)], capture_output=True, text=True,
                               env=env, timeout=300, cwd=HERE.parent)
            assert p.returncode == 0, p.stderr
            assert p.stderr.strip().startswith("wrote ") and p.stderr.strip().endswith(f"rows to {out}")
            outputs[(name, suffix)] = (out.read_bytes(), p.stdout)
    for suffix in ("csv", "json"):
        assert "'numpy'" in outputs[("cold", suffix)][1]
        assert "LOADED []" in outputs[("warm", suffix)][1]
        assert outputs[("warm", suffix)][0] == outputs[("cold", suffix)][0]
    assert (tmp_path / "warm.provenance.json").read_bytes() == (tmp_path / "cold.provenance.json").read_bytes()


def test_scores_one_season_at_a_time_are_the_same_numbers(tmp_path, monkeypatch):
    # large requests hold one season's yearly means at a time, the others in the cache
    from evaluation import scoring
    from evaluation.cache import Cache
    from evaluation.scoring import Comparison, Source

    ref = write_cf(tmp_path / "ref.nc", dlat=15.0, start_year=1990, years=5, land_fraction=lambda la, lo: (la > 0) * 100.0)
    runs = [Source(f"run-{k}", "model", (str(write_cf(tmp_path / f"r{k}.nc", dlat=15.0, start_year=1990, years=5, offset=0.3 * k)),))
            for k in (1, 2)]
    kwargs = dict(reference=Source("obs", "reference", (str(ref),)), models=runs, variable="tas")
    held = Comparison(**kwargs, cache=Cache(tmp_path / "cache-a")).scores(regions=["global", "land"], seasons=["ANN", "DJF", "JJA"])
    monkeypatch.setattr(scoring, "HOLD_LIMIT_BYTES", 0)
    lean = Comparison(**kwargs, cache=Cache(tmp_path / "cache-b"))
    table = lean.scores(regions=["global", "land"], seasons=["ANN", "DJF", "JJA"])
    assert all(not p.seasons for p in lean._prepared.values())  # nothing held after scoring
    pd.testing.assert_frame_equal(table, held)  # bit for bit: float64 round-trips through NetCDF exactly
