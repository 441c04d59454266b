"""Tests of evaluation.timeaxis: seasons across the turn of the year, month-length weights
in every calendar, complete seasons only, and the default-period rule."""

from __future__ import annotations

import cftime
import dask.array as dsa
import numpy as np
import pytest
import xarray as xr
from cfdata import days_in_month

from evaluation import io
from evaluation.errors import InputError
from evaluation.timeaxis import (
    WMO_NORMAL,
    Period,
    climatology,
    complete_years,
    default_period,
    monthly_climatology,
    parse_period,
    parse_season,
    season_label_years,
    season_means,
)


def monthly(months: list[tuple[int, int]], values, *, cal: str = "standard", dask: bool = False) -> xr.DataArray:
    time = [cftime.datetime(y, m, 15, calendar=cal) for y, m in months]
    data = np.asarray(values, dtype="float64")
    if dask:
        data = dsa.from_array(data, chunks=5)
    return xr.DataArray(data, dims=("time",) + ("x",) * (data.ndim - 1), coords={"time": time}, name="v", attrs={"units": "K"})


def years_months(first: int, last: int) -> list[tuple[int, int]]:
    return [(y, m) for y in range(first, last + 1) for m in range(1, 13)]


def code(months):
    """A value that identifies its month: year * 100 + month."""
    return [y * 100 + m for y, m in months]


# ---------------------------------------------------------------------------- labels


def test_djf_is_labelled_by_the_year_of_its_january():
    months = [(1990, 11), (1990, 12), (1991, 1), (1991, 2), (1991, 3)]
    labels = season_label_years(monthly(months, np.zeros(5))["time"], "DJF")
    # WMO practice: DJF 1991 is December 1990 + January/February 1991 (common practice)
    np.testing.assert_array_equal(labels, [-1, 1991, 1991, 1991, -1])


def test_single_month_and_ann_labels_are_calendar_years():
    months = [(1990, 12), (1991, 1)]
    t = monthly(months, np.zeros(2))["time"]
    np.testing.assert_array_equal(season_label_years(t, "ANN"), [1990, 1991])
    np.testing.assert_array_equal(season_label_years(t, "dec"), [1990, -1])


# ---------------------------------------------------------------------------- season means


@pytest.mark.parametrize("cal", ["standard", "noleap", "360_day", "all_leap", "julian", "proleptic_gregorian"])
def test_djf_uses_previous_december_weighted_by_month_length(cal):
    months = years_months(1990, 1992)
    da = monthly(months, code(months), cal=cal, dask=True)
    out = season_means(da, "DJF")
    # complete DJF seasons: 1991 (Dec 1990) and 1992 (Dec 1991); 1990 and 1993 lack months
    np.testing.assert_array_equal(out["year"].values, [1991, 1992])
    for year, got in zip((1991, 1992), out.values, strict=True):
        parts = [(year - 1, 12), (year, 1), (year, 2)]
        w = np.array([days_in_month(y, m, cal) for y, m in parts], dtype=float)
        expected = np.dot(w, [y * 100 + m for y, m in parts]) / w.sum()  # weighted mean (common practice)
        assert got == pytest.approx(expected, rel=1e-14)


@pytest.mark.parametrize("cal", ["standard", "noleap", "360_day", "all_leap", "julian"])
def test_annual_mean_weights_months_by_their_length_in_the_files_calendar(cal):
    months = years_months(1999, 2000)  # 2000 is a Gregorian leap year (divisible by 400)
    values = np.sin(np.arange(len(months)))  # any values
    out = season_means(monthly(months, values, cal=cal), "ANN")
    for i, year in enumerate((1999, 2000)):
        w = np.array([days_in_month(year, m, cal) for m in range(1, 13)], dtype=float)
        assert out.sel(year=year).item() == pytest.approx(np.average(values[12 * i : 12 * i + 12], weights=w), rel=1e-13)


def test_360_day_annual_mean_is_the_plain_mean():
    months = years_months(2001, 2001)
    values = np.arange(12.0) ** 2
    out = season_means(monthly(months, values, cal="360_day"), "ANN")
    # every 360_day month has 30 days (CF conventions 4.4.1): equal weights
    assert out.item() == pytest.approx(values.mean(), rel=1e-15)


def test_incomplete_seasons_are_dropped():
    months = [ym for ym in years_months(1990, 1992) if ym != (1991, 7)]  # July 1991 missing
    da = monthly(months, code(months))
    np.testing.assert_array_equal(season_means(da, "ANN")["year"].values, [1990, 1992])
    np.testing.assert_array_equal(season_means(da, "JJA")["year"].values, [1990, 1992])
    np.testing.assert_array_equal(season_means(da, "MAM")["year"].values, [1990, 1991, 1992])


def test_period_selects_label_years_and_djf_reaches_into_the_previous_year():
    months = years_months(1990, 1993)
    da = monthly(months, code(months))
    out = season_means(da, "DJF", "1991-1991")
    np.testing.assert_array_equal(out["year"].values, [1991])
    w = np.array([31.0, 31.0, 28.0])  # Dec 1990, Jan 1991, Feb 1991 (Gregorian)
    assert out.item() == pytest.approx(np.dot(w, [199012, 199101, 199102]) / w.sum())


def test_a_nan_month_makes_the_season_nan_for_that_cell_only():
    months = years_months(2000, 2000)
    values = np.ones((12, 2))
    values[6, 0] = np.nan
    out = season_means(monthly(months, values), "JJA")
    assert np.isnan(out.values[0, 0]) and out.values[0, 1] == 1.0
    assert season_means(monthly(months, values), "MAM").values[0, 0] == 1.0


def test_single_year_and_empty_selection():
    months = years_months(2005, 2005)
    da = monthly(months, np.arange(12.0))
    ann = season_means(da, "ANN")
    assert ann.sizes["year"] == 1
    assert climatology(ann).item() == pytest.approx(np.average(np.arange(12.0), weights=[days_in_month(2005, m, "standard") for m in range(1, 13)]))
    # a single year of data holds no complete DJF (December of the previous year is missing)
    assert season_means(da, "DJF").sizes["year"] == 0
    assert season_means(da, "ANN", "2010-2012").sizes["year"] == 0


def test_season_means_stay_lazy():
    months = years_months(2000, 2002)
    out = season_means(monthly(months, code(months), dask=True), "SON")
    assert isinstance(out.data, dsa.Array)


def test_monthly_climatology_is_the_mean_of_each_calendar_month():
    months = years_months(2000, 2002)
    values = np.array(code(months), dtype=float)
    out = monthly_climatology(monthly(months, values), "2001-2002")
    expected = values[12:].reshape(2, 12).mean(axis=0)
    np.testing.assert_allclose(out.values, expected)
    np.testing.assert_array_equal(out["month"].values, np.arange(1, 13))


# ---------------------------------------------------------------------------- calendars from files


@pytest.mark.parametrize("cal", ["360_day", "noleap", "365_day", "all_leap", "366_day", "julian", "gregorian", "proleptic_gregorian"])
def test_calendar_from_file_decodes_to_cftime_and_weights_by_its_months(cf_file, cal):
    path = cf_file(f"{cal}.nc", calendar=cal, years=1, start_year=2000, dlat=30.0, field=lambda la, lo, y, m: m + 0 * la)
    ds = io.open_source(str(path))
    t = ds["time"].values
    # cftime's canonical names for the CF aliases (CF conventions 4.4.1: gregorian = standard, ...)
    canonical = {"gregorian": "standard", "365_day": "noleap", "366_day": "all_leap"}.get(cal, cal)
    assert all(isinstance(v, cftime.datetime) and v.calendar == canonical for v in t)
    ann = float(season_means(ds["tas"], "ANN").isel(lat=0, lon=0).compute().item())
    w = [days_in_month(2000, m, cal) for m in range(1, 13)]
    assert ann == pytest.approx(np.average(np.arange(1, 13), weights=w), rel=1e-6)  # float32 storage


# ---------------------------------------------------------------------------- periods


def test_complete_years():
    months = years_months(1990, 1995)[5:-2]  # June 1990 .. October 1995
    assert complete_years(monthly(months, np.zeros(len(months)))["time"]) == Period(1991, 1994)
    assert complete_years(monthly([(1990, 1), (1990, 2)], [0, 0])["time"]) is None


def test_default_period_is_the_wmo_normal_when_every_source_covers_it():
    # WMO-No. 1203 (2017): the current standard normal is 1991-2020
    assert WMO_NORMAL == Period(1991, 2020)
    assert default_period([Period(1950, 2024), Period(1991, 2020)]) == Period(1991, 2020)


def test_default_period_is_the_overlap_otherwise():
    assert default_period([Period(1980, 2005), Period(1995, 2030)]) == Period(1995, 2005)
    assert default_period([Period(1995, 1995), Period(1990, 2000)]) == Period(1995, 1995)


def test_default_period_without_overlap_is_an_input_error():
    with pytest.raises(InputError, match="share no complete year"):
        default_period([Period(1950, 1960), Period(1970, 1980)], names=["ref", "run"])


def test_default_period_with_a_source_lacking_a_complete_year():
    with pytest.raises(InputError, match="no complete year") as err:
        default_period([Period(1950, 1960), None], names=["ref", "run-a"])
    assert err.value.file == "run-a"


@pytest.mark.parametrize(("text", "expected"), [("1981-2010", Period(1981, 2010)), (" 1991 - 2020 ", Period(1991, 2020)), ("2000-2000", Period(2000, 2000))])
def test_parse_period(text, expected):
    assert parse_period(text) == expected
    assert str(parse_period(text)) == f"{expected.start:04d}-{expected.end:04d}"


@pytest.mark.parametrize("text", ["1991", "1991-20x0", "last thirty years", "2020-1991", ""])
def test_bad_period_is_an_input_error(text):
    with pytest.raises(InputError):
        parse_period(text)


def test_seasons():
    assert parse_season("djf") == "DJF"
    assert parse_season(" jan ") == "JAN"
    with pytest.raises(InputError, match="unknown season"):
        parse_season("winter")
    with pytest.raises(InputError):
        parse_season("NDJ")
