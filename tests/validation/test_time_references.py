"""Time axes as modelling centres write them, scored end to end and checked from outside.

Each test writes small NetCDF files that re-create one real structure (end-of-interval
stamps with bounds, daily and 6-hourly output, annual means without a calendar, a
12-month climatology as a ``month`` dimension or a CF climatology axis, months since,
a separate time origin) and compares what gridscore scores with

* the same data written as plain mid-month monthly means (identity of the two readings),
* numpy over the same numbers, with month lengths from cftime (hand computations),
* pandas ``resample("MS").mean()`` for daily -> monthly means.
"""

from __future__ import annotations

import json
import sys
from pathlib import Path

import cftime
import numpy as np
import pandas as pd
import pytest
import xarray as xr

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))  # tests/ helpers
from cfdata import exact_area, naive_pattern_stats  # noqa: E402
from timefiles import GRID, daily_dates, write_raw  # noqa: E402

from evaluation import io  # noqa: E402
from evaluation.scoring import Comparison, Source  # noqa: E402

MEAN_STATE = ("mean", "ref_mean", "bias", "rmse", "crmse", "corr", "std_ratio", "taylor_skill")


def field(year: int, month: int, seed: float = 0.0) -> np.ndarray:
    """Cells that differ, a seasonal cycle, a trend and year-to-year noise (K)."""
    lat = np.deg2rad(GRID["lat"])[:, None]
    lon = np.deg2rad(GRID["lon"])[None, :]
    return (
        270.0 + 20.0 * np.cos(lat) + 2.0 * np.sin(2 * lon + seed) - 8.0 * np.sin(lat) * np.cos(2 * np.pi * (month - 1) / 12)
        + 0.05 * (year - 2000) + 0.4 * np.sin(12.9898 * year + 3.1 * month + seed)
    )  # fmt: skip


def months_of(first: int, last: int) -> list[tuple[int, int]]:
    return [(y, m) for y in range(first, last + 1) for m in range(1, 13)]


def monthly_file(path, months, cal="standard", *, seed=0.0, stamp="mid", values=None):
    """Monthly means; ``stamp`` 'mid' (15th, no bounds) or 'end' (00:00 of the next month's 1st, with bounds)."""
    units = "days since 1950-01-01 00:00:00"
    starts = [cftime.datetime(y, m, 1, calendar=cal) for y, m in months]
    ends = [cftime.datetime(y + (m == 12), m % 12 + 1, 1, calendar=cal) for y, m in months]
    data = np.stack([field(y, m, seed) for y, m in months]) if values is None else values
    attrs = {"units": units, "calendar": cal, "standard_name": "time"}
    if stamp == "mid":
        t = cftime.date2num([cftime.datetime(y, m, 15, calendar=cal) for y, m in months], units, calendar=cal)
        return write_raw(path, t, attrs, data)
    b = np.stack([cftime.date2num(starts, units, calendar=cal), cftime.date2num(ends, units, calendar=cal)], axis=1)
    return write_raw(path, b[:, 1], attrs, data, bounds=b)


def table(ref, models: dict, seasons=("ANN", "DJF", "JJA"), **kw) -> pd.DataFrame:
    cmp = Comparison(
        reference=Source("ref", "reference", (str(ref),)),
        models=[Source(k, "model", (str(v),)) for k, v in models.items()],
        variable="tas",
        cache=False,
        **kw,
    )
    return cmp.scores(seasons=list(seasons)).set_index(["model", "season", "metric"])["value"]


# ---------------------------------------------------------------------------- bounds


@pytest.mark.parametrize("cal", ["standard", "noleap", "360_day"])
def test_end_of_interval_stamps_with_bounds_score_exactly_like_mid_month_stamps(tmp_path, cal):
    # Identity: CF cell bounds say which month a mean covers (CF 1.10 section 7.1); a value
    # stamped at 00:00 on the 1st of the next month with bounds [1st, next 1st] is that
    # month's mean, so the two files hold the same months and must score identically.
    months = months_of(1991, 1995)
    ref = monthly_file(tmp_path / "ref.nc", months, cal, stamp="mid")
    mid = monthly_file(tmp_path / "mid.nc", months, cal, seed=1.0, stamp="mid")
    end = monthly_file(tmp_path / "end.nc", months, cal, seed=1.0, stamp="end")
    a = table(ref, {"run": mid})
    b = table(ref, {"run": end})
    pd.testing.assert_series_equal(a, b, check_exact=True)


# ---------------------------------------------------------------------------- sub-monthly


def daily_file(path, cal, months, *, per_day=1, bounds=True, seed=0.0, constant=True):
    first = (months[0][0], months[0][1], 1)
    last_y, last_m = months[-1]
    stop = (last_y + (last_m == 12), last_m % 12 + 1, 1)
    dates = daily_dates(first, stop, cal, per_day=per_day)
    units = "hours since 1950-01-01 00:00:00"
    start = cftime.date2num(dates, units, calendar=cal)
    step = 24.0 / per_day
    if constant:
        data = np.stack([field(t.year, t.month, seed) for t in dates])
    else:
        rng = np.random.default_rng(7)
        data = np.stack([field(t.year, t.month, seed) for t in dates]) + rng.normal(0.0, 3.0, (len(dates), *GRID["lat"].shape, *GRID["lon"].shape))
    attrs = {"units": units, "calendar": cal, "standard_name": "time"}
    if bounds:
        return write_raw(path, start + step / 2, attrs, data, bounds=np.stack([start, start + step], axis=1)), dates, data
    return write_raw(path, start, attrs, data), dates, data


@pytest.mark.parametrize("cal", ["standard", "noleap", "360_day"])
@pytest.mark.parametrize(("per_day", "bounds"), [(1, True), (4, False)])
def test_daily_values_of_a_monthly_field_give_the_monthly_scores(tmp_path, cal, per_day, bounds):
    # Identity: days (or 6-hour steps) that all equal their month's value average to that
    # value, so scores from them equal scores from the monthly file (tolerance 1e-6).
    months = months_of(1991, 1994)
    ref = monthly_file(tmp_path / "ref.nc", months, cal)
    monthly = monthly_file(tmp_path / "run.nc", months, cal, seed=1.0)
    daily, _, _ = daily_file(tmp_path / "daily.nc", cal, months, per_day=per_day, bounds=bounds, seed=1.0)
    a = table(ref, {"run": monthly})
    b = table(ref, {"run": daily})
    pd.testing.assert_series_equal(a, b, rtol=1e-6, atol=1e-9)


@pytest.mark.parametrize("bounds", [True, False])
def test_daily_to_monthly_means_agree_with_pandas_resample(tmp_path, bounds):
    # Outside reference: pandas ``resample("MS").mean()`` on the same daily numbers
    # (standard calendar, where pandas timestamps are exact).  pandas averages whatever
    # days a month has; every month here is complete, where the two rules agree.
    months = months_of(2001, 2002)
    path, dates, data = daily_file(tmp_path / "daily.nc", "standard", months, bounds=bounds, constant=False)
    index = pd.DatetimeIndex([pd.Timestamp(t.year, t.month, t.day, t.hour) for t in dates])
    frame = pd.DataFrame(data.reshape(len(dates), -1), index=index)
    expected = frame.resample("MS").mean()
    ds = io.open_source(str(path))
    assert [(t.year, t.month) for t in ds["time"].values] == [(t.year, t.month) for t in expected.index]
    np.testing.assert_allclose(ds["tas"].values.reshape(len(expected), -1), expected.to_numpy(), rtol=1e-12)


# ---------------------------------------------------------------------------- annual means


def test_annual_means_without_calendar_score_ann_and_leave_other_seasons_out(tmp_path):
    years = np.arange(1941, 1961)
    units = "days since 1870-09-01 00:00:00"
    # mid-year stamps (an ensemble writer), no calendar attribute: the CF default 'standard'
    t = np.array([(cftime.datetime(y, 7, 2, calendar="standard") - cftime.datetime(1870, 9, 1, calendar="standard")).days for y in years], float)
    ref_values = np.stack([field(y, 6) for y in years])
    run_values = np.stack([field(y, 6, seed=0.5) for y in years])
    ref = write_raw(tmp_path / "ref.nc", t, {"units": units}, ref_values)
    run = write_raw(tmp_path / "run.nc", t, {"units": units}, run_values)
    cmp = Comparison(reference=Source("ref", "reference", (str(ref),)), models=[Source("run", "model", (str(run),))], variable="tas", cache=False)
    scores = cmp.scores(seasons=["ANN", "DJF"])
    assert set(scores["season"]) == {"ANN"}
    assert {"source": "ref", "season": "DJF", "reason": "annual means (one value per year): only ANN can be scored"} in cmp.omissions
    # numpy by hand: the mean over years of each cell, area-weighted statistics (Taylor 2001)
    w = exact_area(GRID["lat_bnds"], GRID["lon_bnds"]).ravel()
    expected = naive_pattern_stats(run_values.mean(axis=0).ravel(), ref_values.mean(axis=0).ravel(), w)
    got = scores.set_index("metric")["value"]
    for metric in MEAN_STATE:
        assert got[metric] == pytest.approx(expected[metric], rel=1e-9, abs=1e-12), metric
    from evaluation.errors import InputError

    with pytest.raises(InputError, match="no seasonal cycle"):
        cmp.seasonal_cycle("run", "global")
    # OLS slope of the area-weighted annual series per decade (numpy.polyfit)
    series = (run_values.reshape(years.size, -1) @ w) / w.sum()
    assert got["trend"] == pytest.approx(10.0 * np.polyfit(years, series, 1)[0], rel=1e-9)


# ---------------------------------------------------------------------------- climatology


def _noleap_days(month: int) -> float:
    return (31, 28, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31)[month - 1]  # CF 1.10 section 4.4.1, 365-day year


def _climatology_month_dim(path, clim):
    ds = xr.Dataset(
        {"tas": (("month", "lat", "lon"), clim, {"units": "K", "standard_name": "air_temperature"})},
        coords={
            "month": ("month", np.arange(1, 13, dtype="int32")),
            "lat": ("lat", GRID["lat"], {"units": "degrees_north", "standard_name": "latitude", "bounds": "lat_bnds"}),
            "lon": ("lon", GRID["lon"], {"units": "degrees_east", "standard_name": "longitude", "bounds": "lon_bnds"}),
        },
    )
    ds["lat_bnds"] = (("lat", "nv"), GRID["lat_bnds"])  # the runs' grid: no remapping enters the check
    ds["lon_bnds"] = (("lon", "nv"), GRID["lon_bnds"])
    ds.to_netcdf(path)
    return path


def _climatology_cf_axis(path, clim):
    # CF 1.10 section 7.4: time stamps in the first year, climatology bounds from the first
    # year's month start to the last year's month end, cell_methods "within/over years"
    cal, units = "noleap", "days since 1991-01-01"
    t = [cftime.datetime(1991, m, 16, calendar=cal) for m in range(1, 13)]
    lo = [cftime.datetime(1991, m, 1, calendar=cal) for m in range(1, 13)]
    hi = [cftime.datetime(2020 + (m == 12), m % 12 + 1, 1, calendar=cal) for m in range(1, 13)]
    b = np.stack([cftime.date2num(lo, units, calendar=cal), cftime.date2num(hi, units, calendar=cal)], axis=1)
    path = write_raw(path, cftime.date2num(t, units, calendar=cal), {"units": units, "calendar": cal, "standard_name": "time"}, clim, bounds=b, bounds_attr="climatology")
    return path


def _climatology_cell_methods(path, clim):
    # twelve mid-month steps of one year, no bounds; CF 1.10 section 7.4 cell_methods say it is a climatology
    cal, units = "noleap", "days since 2000-01-01"
    t = cftime.date2num([cftime.datetime(2000, m, 16, calendar=cal) for m in range(1, 13)], units, calendar=cal)
    path = write_raw(path, t, {"units": units, "calendar": cal, "standard_name": "time"}, clim)
    with xr.open_dataset(path, decode_times=False) as raw:
        ds = raw.load()
    ds["tas"].attrs["cell_methods"] = "time: mean within years time: mean over years"
    ds.to_netcdf(path.with_name("clim_cm.nc"))
    return path.with_name("clim_cm.nc")


@pytest.mark.parametrize("form", ["month dimension", "CF climatology axis", "climatology cell_methods"])
def test_a_12_month_climatology_serves_as_reference_for_the_mean_state(tmp_path, form):
    months = months_of(1991, 1995)
    clim = np.stack([field(2000, m) for m in range(1, 13)])
    writer = {"month dimension": _climatology_month_dim, "CF climatology axis": _climatology_cf_axis, "climatology cell_methods": _climatology_cell_methods}[form]
    ref = writer(tmp_path / "clim.nc", clim)
    run = monthly_file(tmp_path / "run.nc", months, "noleap", seed=0.7)
    cmp = Comparison(reference=Source("clim", "reference", (str(ref),)), models=[Source("run", "model", (str(run),))], variable="tas", cache=False)
    scores = cmp.scores(seasons=["ANN", "JJA"])
    assert any("12-month climatology" in n for n in cmp.notes)  # stated on stderr by the CLI
    w = exact_area(GRID["lat_bnds"], GRID["lon_bnds"]).ravel()
    run_values = np.stack([field(y, m, 0.7) for y, m in months])
    for season, season_months in (("ANN", range(1, 13)), ("JJA", (6, 7, 8))):
        # by hand: month-length weights of a 365-day year (noleap) for both sides
        wm = np.array([_noleap_days(m) for m in season_months])
        ref_clim = np.tensordot(wm, clim[[m - 1 for m in season_months]], axes=1) / wm.sum()
        yearly = [np.tensordot(wm, run_values[[12 * i + m - 1 for m in season_months]], axes=1) / wm.sum() for i in range(5)]
        expected = naive_pattern_stats(np.mean(yearly, axis=0).ravel(), ref_clim.ravel(), w)
        got = scores[scores.season == season].set_index("metric")["value"]
        for metric in MEAN_STATE:
            assert got[metric] == pytest.approx(expected[metric], rel=1e-9, abs=1e-12), (season, metric)
        for metric in ("ref_trend", "ref_trend_pvalue", "iav_ratio"):
            assert np.isnan(got[metric]), metric  # they need the reference's years
        assert np.isfinite(got["trend"])  # the run's own trend stays


# ---------------------------------------------------------------------------- reference-date forms


@pytest.mark.parametrize(
    ("units", "extra", "to_value"),
    [
        ("months since 1991-1-1", {}, lambda i, d: float(i)),  # one step per calendar month
        ("days", {"time_origin": "1-JAN-1991 00:00:00"}, None),  # origin in a separate attribute
        ("days since 0000-01-01", {}, None),  # year 0 in a 365-day calendar
    ],
)
def test_reference_date_forms_score_like_days_since(tmp_path, units, extra, to_value):
    cal = "noleap"
    months = months_of(1991, 1993)
    ref = monthly_file(tmp_path / "ref.nc", months, cal)
    plain = monthly_file(tmp_path / "plain.nc", months, cal, seed=0.3)
    firsts = [cftime.datetime(y, m, 1, calendar=cal) for y, m in months]
    if to_value is not None:
        t = np.array([to_value(i, d) for i, d in enumerate(firsts)])
    else:
        origin = "0000-01-01" if "0000" in units else "1991-01-01"
        t = cftime.date2num(firsts, f"days since {origin}", calendar=cal)  # cftime counts the days
    ends = [cftime.datetime(y + (m == 12), m % 12 + 1, 1, calendar=cal) for y, m in months]
    if to_value is not None:
        b = np.stack([t, t + 1.0], axis=1)
    else:
        b = np.stack([t, cftime.date2num(ends, f"days since {origin}", calendar=cal)], axis=1)
    data = np.stack([field(y, m, 0.3) for y, m in months])
    other = write_raw(tmp_path / "other.nc", t, {"units": units, "calendar": cal, **extra}, data, bounds=b)
    a = table(ref, {"run": plain})
    c = table(ref, {"run": other})
    pd.testing.assert_series_equal(a, c, rtol=1e-12, atol=1e-12)


# ---------------------------------------------------------------------------- command line


def _cli(*args):
    from app.cli import main

    return main(list(map(str, args)))


def test_one_year_of_data_gives_a_partial_table_through_the_cli(tmp_path, capsys):
    months = months_of(1995, 1995)
    ref = monthly_file(tmp_path / "ref.nc", months)
    run = monthly_file(tmp_path / "run.nc", months, seed=0.2)
    out = tmp_path / "scores.json"
    code = _cli("score", "--reference", ref, "--model", f"run={run}", "--variable", "tas", "--season", "ANN", "--season", "DJF", "--season", "JJA", "--output", out)
    err = capsys.readouterr().err
    assert code == 0, err
    assert "gridscore: left out: ref DJF: no complete DJF season" in err  # December 1994 is not there
    written = json.loads(out.read_text())  # {"provenance": {...}, "scores": [rows]}
    assert {row["season"] for row in written["scores"]} == {"ANN", "JJA"}
    assert {(o["source"], o["season"]) for o in written["provenance"]["omitted"]} >= {("ref", "DJF")}


def test_an_unreadable_run_is_left_out_and_the_others_scored(tmp_path, capsys):
    months = months_of(1995, 1996)
    ref = monthly_file(tmp_path / "ref.nc", months)
    good = monthly_file(tmp_path / "good.nc", months, seed=0.2)
    bad = tmp_path / "bad.nc"
    bad.write_bytes(np.random.default_rng(0).bytes(4096))
    out = tmp_path / "scores.csv"
    code = _cli("score", "--reference", ref, "--model", f"good={good}", "--model", f"bad={bad}", "--variable", "tas", "--output", out)
    err = capsys.readouterr().err
    assert code == 0, err
    assert f"gridscore: left out: bad all: {bad}" in err
    assert set(pd.read_csv(out)["model"]) == {"good"}
    # the reference unreadable is still a refusal
    assert _cli("score", "--reference", bad, "--model", f"good={good}", "--variable", "tas", "--output", tmp_path / "x.csv") == 2


def test_time_in_units_mon_is_refused_with_the_true_reason(tmp_path, capsys):
    months = months_of(1995, 1995)
    ref = monthly_file(tmp_path / "ref.nc", months)
    mon = write_raw(tmp_path / "mon.nc", np.zeros(12), {"units": "mon", "long_name": "months"}, np.stack([field(1995, m) for m in range(1, 13)]))
    code = _cli("score", "--reference", mon, "--model", f"run={ref}", "--variable", "tas", "--output", tmp_path / "x.csv")
    err = capsys.readouterr().err.strip().splitlines()
    assert code == 2 and len(err) == 1
    assert str(mon) in err[0] and "'mon' with no reference date" in err[0] and "set time:units to 'months since" in err[0]


def test_a_climatology_reference_has_a_level_series_and_no_trend_difference(tmp_path):
    from evaluation.errors import InputError

    clim = np.stack([field(2000, m) for m in range(1, 13)])
    ref = _climatology_month_dim(tmp_path / "clim.nc", clim)
    run = monthly_file(tmp_path / "run.nc", months_of(1991, 1994), "noleap", seed=0.7)
    cmp = Comparison(reference=Source("clim", "reference", (str(ref),)), models=[Source("run", "model", (str(run),))], variable="tas", cache=False)
    series = cmp.regional_series("clim", "global", "ANN").values
    assert series.size == 4 and np.ptp(series) == 0.0  # the same climatology in every year of the period
    with pytest.raises(InputError, match="no trend"):
        cmp.trend_difference("run", "ANN")


def test_a_non_cf_calendar_spelling_scores_like_its_cf_name_with_a_note(tmp_path):
    # '365_days' is not a CF name (CF 1.10 section 4.4.1 lists 365_day / noleap); it is read as 365_day
    months = months_of(1991, 1993)
    ref = monthly_file(tmp_path / "ref.nc", months, "noleap")
    cf = monthly_file(tmp_path / "cf.nc", months, "365_day", seed=0.4)
    plural = monthly_file(tmp_path / "plural.nc", months, "365_day", seed=0.4)
    with xr.open_dataset(plural, decode_times=False) as raw:
        ds = raw.load()
    ds["time"].attrs["calendar"] = "365_days"
    ds.to_netcdf(tmp_path / "plural2.nc")
    pd.testing.assert_series_equal(table(ref, {"run": cf}), table(ref, {"run": tmp_path / "plural2.nc"}), check_exact=True)
    cmp = Comparison(reference=Source("ref", "reference", (str(ref),)), models=[Source("run", "model", (str(tmp_path / "plural2.nc"),))], variable="tas", cache=False)
    assert any("'365_days'" in n and "'365_day'" in n for n in cmp.notes)
