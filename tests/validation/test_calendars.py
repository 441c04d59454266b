"""Calendars: month-length weights in every CF calendar, DJF from the previous December,
and a 360_day run scored against a standard-calendar reference.

Outside references: cftime date arithmetic (days from the first of a month to the first
of the next), the CF conventions (1.10, section 4.4.1, calendar definitions) for the
February and October lengths, and season means built by hand (``by_hand`` in conftest,
cftime only).
"""

from __future__ import annotations

import numpy as np
import pytest

from evaluation.io import CF_CALENDARS, open_source
from evaluation.timeaxis import season_means

# Years chosen to tell the calendars apart: 1500 is a leap year for Julian rules only
# (standard before 1582 follows them), 1582 holds the Julian-to-Gregorian switch of the
# standard calendar (4 October is followed by 15 October), 1900 is a leap year for Julian
# rules only, 2000 for both Julian and Gregorian rules, 2001 for neither.
PROBE_YEARS = (1500, 1582, 1900, 2000, 2001)

# CF conventions 1.10, section 4.4.1: February in each probe year, per calendar.
FEBRUARY = {
    "standard": (29, 28, 28, 29, 28),
    "gregorian": (29, 28, 28, 29, 28),
    "proleptic_gregorian": (28, 28, 28, 29, 28),
    "julian": (29, 28, 29, 29, 28),
    "noleap": (28,) * 5,
    "365_day": (28,) * 5,
    "all_leap": (29,) * 5,
    "366_day": (29,) * 5,
    "360_day": (30,) * 5,
}


def _probe_file(nc_file, calendar: str, years=PROBE_YEARS):
    """One cell per month: cell k is 1 in month k and 0 otherwise, so a season mean of
    cell k is exactly month k's weight within its season."""
    import cftime

    times = [cftime.datetime(y, m, 15, calendar=calendar) for y in years for m in range(1, 13)]
    n = len(times)
    nlon = 12
    nlat = n // nlon
    lat = np.linspace(-80, 80, nlat)
    lon = np.arange(-180.0, 180.0, 30.0) + 15.0
    probe = np.eye(n).reshape(n, nlat, nlon)
    path = nc_file(f"probe_{calendar}.nc", {"tas": (probe, {"units": "K", "standard_name": "air_temperature"})},
                   grid={"lat": lat, "lon": lon}, times=times, calendar=calendar, bounds=False)
    return path, times


@pytest.mark.parametrize("calendar", CF_CALENDARS)
def test_month_length_weights_agree_with_cftime(nc_file, by_hand, calendar):
    # Source: cftime date arithmetic for the length of every month, and CF conventions
    # 1.10 section 4.4.1 for February in 1500/1582/1900/2000/2001 and October 1582
    # (21 days in the mixed Julian/Gregorian standard calendar); rtol 1e-12.
    assert set(CF_CALENDARS) == set(FEBRUARY)
    path, times = _probe_file(nc_file, calendar)
    da = open_source(str(path))["tas"].load()
    assert da["time"].encoding.get("calendar", calendar) == calendar  # the file's own calendar is kept
    lengths = by_hand.month_lengths(times)
    annual = season_means(da, "ANN").values.reshape(len(PROBE_YEARS), len(times))
    for i, year in enumerate(PROBE_YEARS):
        months = slice(12 * i, 12 * i + 12)
        expected = lengths[months] / lengths[months].sum()
        np.testing.assert_allclose(annual[i, months], expected, rtol=1e-12, err_msg=f"{calendar} {year}")
        # February's weight relative to January's (31 days in every calendar but 360_day)
        january = 30.0 if calendar == "360_day" else 31.0
        assert annual[i, 12 * i + 1] / annual[i, 12 * i] * january == pytest.approx(FEBRUARY[calendar][i], rel=1e-12)
    if calendar in ("standard", "gregorian"):
        october_1582 = 12 * 1 + 9
        assert annual[1, october_1582] / annual[1, october_1582 - 1] * 30.0 == pytest.approx(21.0, rel=1e-12)


@pytest.mark.parametrize("calendar", ["standard", "noleap", "360_day", "julian", "all_leap"])
def test_djf_mean_by_hand(nc_file, times_factory, by_hand, calendar):
    # Source: common practice (WMO climatological seasons): DJF of year Y is December of
    # Y-1 with January and February of Y, each month weighted by its length (cftime);
    # an incomplete season at either end of the data is left out; rtol 1e-12.
    times = times_factory(1981, 1990, calendar)
    year = np.array([t.year for t in times], dtype=float)[:, None, None]
    month = np.array([t.month for t in times], dtype=float)[:, None, None]
    lat = np.array([-45.0, 0.0, 45.0])
    lon = np.array([-120.0, 0.0, 120.0])
    data = (year - 1980) + month / 100 + np.sin(np.deg2rad(lat))[None, :, None] * np.cos(np.deg2rad(lon))[None, None, :]
    path = nc_file("tas.nc", {"tas": (data, {"units": "K"})}, grid={"lat": lat, "lon": lon}, times=times, calendar=calendar, bounds=False)
    da = open_source(str(path))["tas"]
    got = season_means(da, "DJF").load()
    # DJF 1981 lacks December 1980; DJF 1991 has only December 1990
    assert got["year"].values.tolist() == list(range(1982, 1991))
    expected = by_hand.season_means(data, times, "DJF", range(1982, 1991))
    np.testing.assert_allclose(got.values, np.stack([expected[y] for y in range(1982, 1991)]), rtol=1e-12)
    # a period selects label years: DJF 1983 starts in December 1982
    sub = season_means(da, "DJF", "1983-1985").load()
    assert sub["year"].values.tolist() == [1983, 1984, 1985]
    np.testing.assert_allclose(sub.values, np.stack([expected[y] for y in (1983, 1984, 1985)]), rtol=1e-12)


def test_djf_counts_when_the_data_start_in_december(nc_file, by_hand):
    # Source: common practice (WMO seasons): data from December 1980 make DJF 1981
    # complete; hand-built mean with cftime month lengths; rtol 1e-12.
    import cftime

    times = [cftime.datetime(1980, 12, 15, calendar="standard")] + [cftime.datetime(y, m, 15, calendar="standard") for y in (1981, 1982) for m in range(1, 13)]
    data = np.arange(len(times), dtype=float)[:, None, None] * np.ones((1, 2, 2))
    path = nc_file("dec.nc", {"tas": (data, {"units": "K"})}, grid={"lat": np.array([-10.0, 10.0]), "lon": np.array([0.0, 90.0])},
                   times=times, calendar="standard", bounds=False)
    got = season_means(open_source(str(path))["tas"], "DJF").load()
    assert got["year"].values.tolist() == [1981, 1982]
    expected = by_hand.season_means(data, times, "DJF", [1981, 1982])
    np.testing.assert_allclose(got.values[:, 0, 0], [expected[1981][0, 0], expected[1982][0, 0]], rtol=1e-12)
    # by hand: (31*0 + 31*1 + 28*2) / 90 for DJF 1981 (1981 is not a leap year)
    assert got.values[0, 0, 0] == pytest.approx((31 * 0 + 31 * 1 + 28 * 2) / 90, rel=1e-12)


def test_360_day_run_and_standard_reference_overlap_on_the_same_months(nc_file, grid_factory, times_factory, by_hand, score_cli):
    # Source: common practice (months are matched by calendar label, not by elapsed days;
    # WMO seasons from the previous December) and season means built by hand with
    # cftime month lengths.  Every month carries its own code (years since 1980 plus
    # month/100), so a month paired with the wrong one shows as a bias; rtol 1e-12.
    ref_times = times_factory(1981, 1990, "standard")
    import cftime

    run_times = [cftime.datetime(1979, 12, 15, calendar="360_day")] + times_factory(1980, 1991, "360_day") + \
        [cftime.datetime(1992, m, 15, calendar="360_day") for m in range(1, 7)]

    def coded(times, grid):
        code = np.array([(t.year - 1980) + t.month / 100 for t in times])
        return code[:, None, None] * np.ones((1, grid["lat"].size, grid["lon"].size))

    ref_grid, run_grid = grid_factory(10.0, 10.0), grid_factory(12.0, 15.0, lon0=0.0)
    attrs = {"units": "K", "standard_name": "air_temperature"}
    ref = nc_file("ref.nc", {"tas": (coded(ref_times, ref_grid), attrs)}, grid=ref_grid, times=ref_times, calendar="standard")
    run = nc_file("run.nc", {"tas": (coded(run_times, run_grid), attrs)}, grid=run_grid, times=run_times, calendar="360_day")
    table = score_cli(["--reference", f"obs={ref}", "--model", f"run-360={run}", "--variable", "tas",
                       "--season", "JAN", "--season", "DJF", "--season", "JJA", "--season", "ANN"])
    assert set(table["period"]) == {"1981-1990"}  # the complete years both sources have
    values = {(s, m): v for s, m, v in zip(table["season"], table["metric"], table["value"], strict=True)}

    ref_code = coded(ref_times, {"lat": np.zeros(1), "lon": np.zeros(1)})
    run_code = coded(run_times, {"lat": np.zeros(1), "lon": np.zeros(1)})
    for season, years in (("JAN", range(1981, 1991)), ("JJA", range(1981, 1991)), ("ANN", range(1981, 1991)),
                          ("DJF", range(1982, 1991))):  # the reference has no December 1980
        ref_hand = by_hand.season_means(ref_code, ref_times, season, years)
        run_hand = by_hand.season_means(run_code, run_times, season, years)
        assert sorted(ref_hand) == sorted(run_hand) == list(years)
        np.testing.assert_allclose(values[(season, "ref_mean")], np.mean([v[0, 0] for v in ref_hand.values()]), rtol=1e-12)
        np.testing.assert_allclose(values[(season, "mean")], np.mean([v[0, 0] for v in run_hand.values()]), rtol=1e-12)
    # single months: the same code in both calendars, so no bias and the same trend (1 per year)
    assert values[("JAN", "bias")] == pytest.approx(0.0, abs=1e-12)
    assert values[("JAN", "trend")] == pytest.approx(10.0, rel=1e-12)
    assert values[("JAN", "ref_trend")] == pytest.approx(10.0, rel=1e-12)
    assert values[("DJF", "trend")] == pytest.approx(values[("DJF", "ref_trend")], rel=1e-9)
