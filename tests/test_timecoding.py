"""Tests of evaluation.timecoding: calendar names, reference dates, months since, separate
time origins, bounds midpoints, frequencies, sub-monthly to monthly means, stamp notes.

Expected dates come from cftime directly (``cftime.num2date`` / ``cftime.datetime``) or are
written out by hand; expected means from numpy over the same numbers.
"""

from __future__ import annotations

import datetime

import cftime
import numpy as np
import pytest
import xarray as xr
from timefiles import GRID, daily_dates, month_value, write_raw

from evaluation import io, timecoding
from evaluation.errors import InputError
from evaluation.timeaxis import season_means

# ---------------------------------------------------------------------------- calendars


@pytest.mark.parametrize(
    ("written", "cf"),
    [
        ("NOLEAP", "noleap"), ("Standard", "standard"), ("360_DAY", "360_day"),  # CF names in any case
        ("365_days", "365_day"), ("no_leap", "noleap"), ("366_days", "366_day"), ("360", "360_day"),
        ("gregorian_proleptic", "proleptic_gregorian"),
    ],
)  # fmt: skip
def test_calendar_spellings_decode_as_their_cf_name(written, cf):
    notes: list[str] = []
    values = np.array([0.0, 59.0, 365.0, 400.5])
    got = timecoding.decode_values(values, "days since 2001-01-01", written, notes=notes)
    # source: cftime with the CF calendar name
    expected = cftime.num2date(values, "days since 2001-01-01", calendar=cf)
    assert [str(g) for g in got] == [str(e) for e in expected]
    assert all(g.calendar == e.calendar for g, e in zip(got, expected, strict=True))  # cftime names 365_day noleap
    if written.lower() != cf:
        assert notes and cf in notes[0]


def test_unknown_calendar_names_the_attribute_and_the_cf_names():
    with pytest.raises(InputError) as err:
        timecoding.decode_values(np.array([0.0]), "days since 2000-01-01", "lunar", file="x.nc")
    message = err.value.message
    assert "lunar" in message and "time:calendar" in message and "noleap" in message


# ---------------------------------------------------------------------------- reference dates


@pytest.mark.parametrize("cal", ["noleap", "360_day", "proleptic_gregorian"])
def test_year_zero_reference_decodes_where_the_calendar_has_year_zero(cal):
    values = np.array([0.0, 31.0, 400.0])
    got = timecoding.decode_values(values, "days since 0000-01-01", cal)
    # source: cftime, which counts year 0 in these calendars (has_year_zero=True)
    expected = cftime.num2date(values, "days since 0000-01-01", calendar=cal, has_year_zero=True)
    assert [str(g) for g in got] == [str(e) for e in expected]
    assert got[0].year == 0


@pytest.mark.parametrize("cal", ["standard", "julian", "gregorian"])
def test_year_zero_reference_is_refused_in_calendars_without_it(cal):
    # cftime itself refuses year 0 here: "zero not allowed as a reference year" (checked alongside)
    with pytest.raises(ValueError):
        cftime.num2date([0.0], "days since 0000-01-01", calendar=cal)
    with pytest.raises(InputError) as err:
        timecoding.decode_values(np.array([0.0]), "days since 0000-01-01", cal, file="f.nc")
    message = err.value.message
    assert "year 0" in message and "'days since 0001-01-01'" in message
    assert "time:calendar" not in message  # the calendar was given: it is not the problem


def test_year_zero_without_a_calendar_attribute_offers_both_remedies():
    with pytest.raises(InputError) as err:
        timecoding.decode_values(np.array([0.0]), "days since 0000-01-01", None)
    assert "no calendar attribute" in err.value.message and "time:calendar" in err.value.remedy


@pytest.mark.parametrize(("cal", "fix"), [("standard", "0001-01-01"), ("noleap", "0000-01-01")])
def test_month_zero_day_zero_is_not_a_date(cal, fix):
    with pytest.raises(InputError) as err:
        timecoding.decode_values(np.array([0.0, 1.0]), "days since 0000-00-00", cal)
    message = err.value.message
    assert "not a date" in message and f"set time:units to 'days since {fix}'" in message
    assert "calendar" not in err.value.remedy


def test_months_since_is_calendar_month_arithmetic():
    got = timecoding.decode_values(np.array([0, 1, 2, 13, -1]), "months since 2004-12-1", None)
    # by hand: December 2004 + n months, day 1
    assert [(t.year, t.month, t.day) for t in got] == [(2004, 12, 1), (2005, 1, 1), (2005, 2, 1), (2006, 1, 1), (2004, 11, 1)]


def test_years_since_counts_whole_years():
    got = timecoding.decode_values(np.array([0, 1, 50]), "years since 1950-07-01", "noleap")
    assert [(t.year, t.month, t.day) for t in got] == [(1950, 7, 1), (1951, 7, 1), (2000, 7, 1)]


def test_fractional_months_are_refused_with_the_fix():
    with pytest.raises(InputError) as err:
        timecoding.decode_values(np.array([0.5, 1.5]), "months since 2000-01-01", "standard")
    assert "fractional" in err.value.message and "days since 2000-01-01" in err.value.remedy


@pytest.mark.parametrize("origin", ["1-JAN-1990 00:00:00", "01-JAN-1990:00:00:00", "1990-01-01 00:00:00"])
def test_time_origin_attribute_gives_the_reference_date(origin):
    values = np.array([0.0, 31.0, 365.0])
    got = timecoding.decode_values(values, "days", "noleap", time_origin=origin)
    expected = cftime.num2date(values, "days since 1990-01-01", calendar="noleap")  # source: cftime
    assert [str(g) for g in got] == [str(e) for e in expected]


def test_units_mon_without_origin_is_refused_for_its_true_reason():
    with pytest.raises(InputError) as err:
        timecoding.decode_values(np.zeros(36), "mon", None, file="regional.nc")
    message = err.value.message
    assert "'mon' with no reference date" in message and "all 36 time values are equal" in message
    assert "set time:units to 'months since" in message and "calendar" not in message


def test_messages_are_one_untruncated_line():
    origin = "01-JAN-0000:00:00:00"
    with pytest.raises(InputError) as err:
        timecoding.decode_values(np.array([0.0]), "days", None, time_origin=origin, file="/a/very/long/" + "x" * 150 + ".nc")
    message = err.value.message
    assert "\n" not in message and len(message) > 200 and origin in message and "time:time_origin" in message


# ---------------------------------------------------------------------------- bounds


def test_end_of_interval_stamps_with_bounds_give_the_midpoint(tmp_path):
    cal = "standard"
    months = [(2001, m) for m in range(1, 13)]
    starts = [cftime.datetime(y, m, 1, calendar=cal) for y, m in months]
    ends = [cftime.datetime(y + (m == 12), m % 12 + 1, 1, calendar=cal) for y, m in months]
    units = "days since 2001-01-01"
    path = write_raw(
        tmp_path / "end.nc",
        cftime.date2num(ends, units, calendar=cal),  # stamped at 00:00 of the 1st of the NEXT month
        {"units": units, "calendar": cal, "standard_name": "time"},
        np.stack([month_value(y, m) for y, m in months]),
        bounds=np.stack([cftime.date2num(starts, units, calendar=cal), cftime.date2num(ends, units, calendar=cal)], axis=1),
    )
    ds = io.open_source(str(path))
    got = ds["time"].values
    # by hand: the midpoint of [first of month, first of next month] (January: 16th 12:00)
    assert [(t.month, t.day) for t in got] == [(m, 1 + ((e - s).days // 2)) for (_, m), s, e in zip(months, starts, ends, strict=True)]
    assert got[0] == cftime.datetime(2001, 1, 16, 12, calendar=cal)
    assert timecoding.stamp_notes(xr.open_dataset(path, decode_times=False)) == []  # bounds decide: nothing to note


def test_first_of_month_stamps_without_bounds_leave_a_note(tmp_path):
    units = "days since 2001-01-01"
    dates = [cftime.datetime(2001, m, 1, calendar="standard") for m in range(1, 13)]
    path = write_raw(tmp_path / "first.nc", cftime.date2num(dates, units, calendar="standard"), {"units": units, "calendar": "standard"}, np.zeros((12, 3, 4)))
    notes = timecoding.stamp_notes(xr.open_dataset(path, decode_times=False))
    assert len(notes) == 1 and "00:00 on the 1st" in notes[0] and "time:bounds" in notes[0]
    ds = io.open_source(str(path))  # taken as they are: January stays January
    assert [t.month for t in ds["time"].values] == list(range(1, 13))


# ---------------------------------------------------------------------------- frequencies


def _daily_file(path, cal, *, per_day=1, with_bounds=True, first=(2001, 1, 1), stop=(2002, 1, 1), values=None):
    dates = daily_dates(first, stop, cal, per_day=per_day)
    units = "hours since 2000-01-01 00:00:00"
    start = cftime.date2num(dates, units, calendar=cal)
    step = 24.0 / per_day
    data = np.stack([month_value(t.year, t.month) for t in dates]) if values is None else values(dates)
    bounds = np.stack([start, start + step], axis=1) if with_bounds else None
    # with bounds the stamp is the interval end; without, the interval start
    stamps = start + step if with_bounds else start
    return write_raw(path, stamps, {"units": units, "calendar": cal, "standard_name": "time"}, data, bounds=bounds), dates


@pytest.mark.parametrize("cal", ["standard", "noleap", "360_day", "all_leap", "julian"])
@pytest.mark.parametrize(("per_day", "with_bounds"), [(1, True), (1, False), (4, True), (4, False)])
def test_sub_monthly_constant_within_months_gives_the_monthly_values(tmp_path, cal, per_day, with_bounds):
    path, _ = _daily_file(tmp_path / "d.nc", cal, per_day=per_day, with_bounds=with_bounds)
    ds = io.open_source(str(path))
    assert ds["tas"].chunks is not None  # still lazy
    assert timecoding.frequency(ds["time"]) == "monthly" and ds.sizes["time"] == 12
    got = ds["tas"].values
    for i, t in enumerate(ds["time"].values):
        np.testing.assert_allclose(got[i], month_value(t.year, t.month), rtol=0, atol=1e-9)


def test_daily_means_weighted_by_interval_length_match_numpy(tmp_path):
    cal = "noleap"
    rng = np.random.default_rng(3)
    path, dates = _daily_file(tmp_path / "d.nc", cal, values=lambda d: rng.normal(280.0, 5.0, (len(d), 3, 4)))
    with xr.open_dataset(path) as raw:
        values = raw["tas"].values
    ds = io.open_source(str(path))
    month = np.array([t.month for t in dates])
    for i in range(12):
        expected = values[month == i + 1].mean(axis=0)  # numpy: equal days, plain mean per month
        np.testing.assert_allclose(ds["tas"].values[i], expected, rtol=1e-12)


def test_incomplete_months_are_left_out_and_missing_days_make_the_cell_missing(tmp_path):
    cal = "standard"

    def values(dates):
        v = np.stack([month_value(t.year, t.month) for t in dates])
        v[40, 0, 0] = np.nan  # 10 February: one missing day in one cell
        return v

    # 15 January to 31 March: January is incomplete
    path, _ = _daily_file(tmp_path / "d.nc", cal, first=(2001, 1, 15), stop=(2001, 4, 1), values=values)
    ds = io.open_source(str(path))
    assert [t.month for t in ds["time"].values] == [2, 3]
    feb = ds["tas"].values[0]
    assert np.isnan(feb[0, 0]) and np.isfinite(feb).sum() == feb.size - 1


def test_annual_means_without_calendar_are_annual_and_scored_for_ann_only(tmp_path):
    years = np.arange(1941, 1951)
    # an ensemble writer: mid-year stamps in days since a date, no calendar attribute
    stamps = np.array([(cftime.datetime(y, 7, 2, calendar="standard") - cftime.datetime(1870, 9, 1, calendar="standard")).days for y in years], dtype=float)
    data = np.stack([month_value(y, 6) for y in years])
    path = write_raw(tmp_path / "ann.nc", stamps, {"units": "days since 1870-09-01 00:00:00"}, data)
    ds = io.open_source(str(path))
    assert timecoding.frequency(ds["time"]) == "annual"
    ann = season_means(ds["tas"], "ANN")
    np.testing.assert_array_equal(ann["year"].values, years)
    np.testing.assert_allclose(ann.values, data)  # annual means pass through unchanged
    assert season_means(ds["tas"], "DJF").sizes["year"] == 0


def test_month_dimension_becomes_a_climatology(tmp_path):
    data = np.stack([month_value(2000, m) for m in (7, 1)])
    ds = xr.Dataset(
        {"tas": (("month", "lat", "lon"), data, {"units": "K"})},
        coords={
            "month": ("month", np.array([7, 1], dtype="int32")),
            "lat": ("lat", GRID["lat"], {"units": "degrees_north"}),
            "lon": ("lon", GRID["lon"], {"units": "degrees_east"}),
        },
    )
    ds.to_netcdf(tmp_path / "clim.nc")
    out = io.open_source(str(tmp_path / "clim.nc"))
    assert timecoding.frequency(out["time"]) == "climatology"
    assert [t.month for t in out["time"].values] == [1, 7]  # sorted
    jan = season_means(out["tas"], "JAN")
    np.testing.assert_allclose(jan.values[0], month_value(2000, 1))
    assert season_means(out["tas"], "DJF").sizes["year"] == 0  # December and February are absent


def test_chunks_of_daily_data_are_whole_months_or_years():
    # 64 MB of float64 per chunk by default; one year of 1-degree daily data is 190 MB
    cells = 180 * 360
    steps = io._time_chunk(cells, steps_per_month=30.4)
    assert steps % 30 == 0 and steps * cells * 8 <= 64 * 2**20
    assert io._time_chunk(10, steps_per_month=30.4) % 360 == 0  # a small grid: whole years


def test_steps_per_month_of_six_hourly_data(tmp_path):
    path, _ = _daily_file(tmp_path / "h.nc", "standard", per_day=4, stop=(2001, 2, 1))
    with xr.open_dataset(path, decode_times=False) as raw:
        assert timecoding.steps_per_month(raw) == pytest.approx(4 * 30.4375)


def test_a_date_with_time_of_day_and_seconds_is_kept():
    got = timecoding.decode_values(np.array([0.0, 1.5]), "hours since 2000-03-01T06:30:15.5Z", "standard")
    assert got[0] == cftime.datetime(2000, 3, 1, 6, 30, 15, 500000, calendar="standard")
    assert got[1] - got[0] == datetime.timedelta(hours=1.5)


def test_pentads_are_refused_because_they_straddle_months(tmp_path):
    units = "days since 2001-01-01"
    t = np.arange(0.0, 365.0, 5.0)  # five-day means: 2001-01-31 .. 02-04 belongs to two months
    path = write_raw(tmp_path / "pentads.nc", t + 2.5, {"units": units, "calendar": "noleap"}, np.zeros((t.size, 3, 4)), bounds=np.stack([t, t + 5.0], axis=1))
    with pytest.raises(InputError, match="straddle month boundaries") as err:
        io.open_source(str(path))
    assert "pentads.nc" in err.value.message


def test_daily_to_monthly_builds_a_graph_and_reads_no_data(tmp_path, raise_if_computed):
    path, _ = _daily_file(tmp_path / "d.nc", "standard")
    with raise_if_computed(max_computes=0, touching=("tas",)):
        ds = io.open_source(str(path))
        monthly = season_means(ds["tas"], "JJA")
    assert monthly.chunks is not None  # computed later, in the scoring's one pass per source


def test_stamps_outside_their_bounds_leave_a_note_and_the_bounds_decide(tmp_path):
    units = "days since 2001-01-01"
    lo = np.array([0.0, 31.0])
    hi = np.array([31.0, 59.0])
    path = write_raw(tmp_path / "odd.nc", np.array([100.0, 200.0]), {"units": units, "calendar": "noleap"}, np.zeros((2, 3, 4)), bounds=np.stack([lo, hi], axis=1))
    notes: list[str] = []
    with xr.open_dataset(path, decode_times=False) as raw:
        ds = timecoding.decode(raw, notes=notes)
    assert [t.month for t in ds["time"].values] == [1, 2]  # midpoints of January and February
    assert notes and "2 of 2 time stamps lie outside their bounds" in notes[0]


def test_files_with_their_own_reference_dates_are_decoded_each_and_joined(tmp_path):
    # model output often counts each file's time from its own start
    cal = "360_day"
    paths = []
    for year in (2001, 2002):
        dates = daily_dates((year, 1, 1), (year + 1, 1, 1), cal)
        units = f"days since {year}-01-01"
        t = cftime.date2num(dates, units, calendar=cal)
        data = np.stack([month_value(d.year, d.month) for d in dates])
        paths.append(str(write_raw(tmp_path / f"d{year}.nc", t + 0.5, {"units": units, "calendar": cal}, data, bounds=np.stack([t, t + 1.0], axis=1))))
    ds = io.open_source(paths)
    assert [(t.year, t.month) for t in ds["time"].values] == [(y, m) for y in (2001, 2002) for m in range(1, 13)]
    for i, t in enumerate(ds["time"].values):
        np.testing.assert_allclose(ds["tas"].values[i], month_value(t.year, t.month), rtol=0, atol=1e-9)
