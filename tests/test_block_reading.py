"""Season means of a source whose monthly values are read a few whole years at a time
(``evaluation.scoring.BLOCK_BYTES``), and a score whose seasons are partly held in memory,
partly read back from the cache (``HOLD_LIMIT_BYTES``).

The expected values are made from the file itself: its raw values read with xarray
without decoding the times, the times decoded with cftime, oriented south to north and
-180..180 by hand, and month-length weighted means by hand (``cfdata.hand_season_means``:
cftime's calendars, WMO season labels, DJF with the previous December; common practice).
"""

from __future__ import annotations

import numpy as np
import pytest
from cfdata import exact_area, hand_season_means, read_monthly, write_cf

from evaluation import scoring
from evaluation.cache import Cache
from evaluation.scoring import Comparison, Source


def _canonical(values: np.ndarray, ds) -> tuple[np.ndarray, np.ndarray]:
    """Values ``(time, lat, lon)`` of a file stored north to south on 0..360, turned south to
    north on -180..180 (ascending) by hand, and the cell areas of that grid (R² Δsin φ Δλ)."""
    lat = ds["lat"].values
    lon = (ds["lon"].values + 180.0) % 360.0 - 180.0
    rows = np.argsort(lat)
    cols = np.argsort(lon, kind="stable")
    lat_b = np.sort(ds["lat_bnds"].values[rows], axis=1)
    lon_b = (ds["lon_bnds"].values[cols] + 180.0) % 360.0 - 180.0
    lon_b[:, 1] = lon_b[:, 0] + np.abs(ds["lon_bnds"].values[cols, 1] - ds["lon_bnds"].values[cols, 0])
    return values[:, rows][:, :, cols], exact_area(lat_b, lon_b)


def _patchy(lat, lon):
    return (lat > 40) & (lon < -120)  # missing in every month: NaN means there


@pytest.mark.parametrize("years_per_block", [1, 2, 5])
def test_season_means_read_in_blocks_equal_hand_means_of_the_whole_file(tmp_path, monkeypatch, years_per_block):
    # 1990-1996 without February 1993: DJF and ANN of 1993 are incomplete and absent; DJF
    # takes the December before each block's first year
    steps = [(y, m) for y in range(1990, 1997) for m in range(1, 13) if (y, m) != (1993, 2)]
    path = write_cf(tmp_path / "run.nc", dlat=10.0, months=steps, lat_descending=True, lon_0_360=True,
                    nan_mask=_patchy, calendar="noleap")
    raw, file_steps, cal, ds = read_monthly(path, "tas")
    values, _ = _canonical(raw, ds)
    cells = values.shape[1] * values.shape[2]
    monkeypatch.setattr(scoring, "BLOCK_BYTES", years_per_block * 12 * cells * 4)  # float32 stored
    cmp = Comparison(reference=Source("obs", "reference", (str(path),)),
                     models=[Source("run", "model", (str(path),))], variable="tas", period="1991-1996", cache=False)
    assert cmp._reads_in_blocks("run")
    cmp.prepare(["DJF", "ANN", "MAM"])
    cmp.prepare(["JJA"])  # after the files were closed: read again
    for season in ("DJF", "ANN", "MAM", "JJA"):
        expected = hand_season_means(values, file_steps, cal, season, 1991, 1996)
        got = cmp.season_series("run", season)
        assert got["year"].values.tolist() == sorted(expected)  # 1993 gone from DJF and ANN only
        for year, mean in expected.items():
            # the same float32 values in float64, weighted alike: equal to rounding
            np.testing.assert_allclose(got.sel(year=year).values, mean, rtol=1e-13, atol=0.0, equal_nan=True)


def test_seasons_partly_held_partly_read_back_give_the_hand_bias(tmp_path, monkeypatch):
    # two sources and three seasons of 8 years; room to hold one season: the other two
    # are written to the cache in the background and read back when they are scored
    ref = write_cf(tmp_path / "ref.nc", dlat=15.0, start_year=1990, years=8, lat_descending=True, lon_0_360=True)
    run = write_cf(tmp_path / "run.nc", dlat=15.0, start_year=1990, years=8, offset=0.7, scale=1.1)
    cmp = Comparison(reference=Source("obs", "reference", (str(ref),)), models=[Source("run", "model", (str(run),))],
                     variable="tas", period="1991-1997", cache=Cache(tmp_path / "cache"))
    seasons = ["ANN", "DJF", "JJA"]
    cells = 12 * 24
    monkeypatch.setattr(scoring, "HOLD_LIMIT_BYTES", 2 * 7 * cells * 8)  # one season of both sources
    assert cmp._held(seasons) == ["ANN"]
    table = cmp.scores(regions=["global"], seasons=seasons)
    assert all(not p.seasons for p in cmp._prepared.values())  # nothing held after scoring
    raw_r, steps_r, cal_r, ds_r = read_monthly(ref, "tas")
    raw_m, steps_m, cal_m, ds_m = read_monthly(run, "tas")
    ref_values, area = _canonical(raw_r, ds_r)
    for season in seasons:
        clim_r = np.mean(list(hand_season_means(ref_values, steps_r, cal_r, season, 1991, 1997).values()), axis=0)
        clim_m = np.mean(list(hand_season_means(raw_m, steps_m, cal_m, season, 1991, 1997).values()), axis=0)
        # bias: area-weighted mean of the climatologies' difference (Gleckler et al. 2008)
        bias = np.sum(area * (clim_m - clim_r)) / np.sum(area)
        got = table[(table["season"] == season) & (table["metric"] == "bias")]["value"].item()
        assert got == pytest.approx(bias, rel=1e-12, abs=1e-12)


def test_a_file_replaced_between_two_reads_of_one_comparison_is_refused_not_mixed(tmp_path):
    """A source's files are closed after a read and opened again by path for another season;
    a file replaced in between (an atomic save) would be read with the first file's decoded
    time axis and packing.  The comparison refuses to read it (one line naming the file) instead
    of mixing two versions; a new comparison reads the new file whole, 5 K warmer than the
    reference everywhere (the offset written, common practice: a uniform shift moves every
    mean by itself)."""
    import os

    from evaluation.errors import InputError

    ref = write_cf(tmp_path / "ref.nc", dlat=15.0, start_year=1990, years=8)
    run = write_cf(tmp_path / "run.nc", dlat=15.0, start_year=1990, years=8)
    new = write_cf(tmp_path / "new.nc", dlat=15.0, start_year=1990, years=8, offset=5.0)

    def comparison():
        return Comparison(reference=Source("o", "reference", (str(ref),)), models=[Source("r", "model", (str(run),))],
                          variable="tas", period="1991-1997", cache=False)

    first = comparison()
    assert first._reads_in_blocks("r")
    first.prepare(["ANN"])
    os.replace(new, run)
    with pytest.raises(InputError) as err:
        first.prepare(["JJA"])
    assert str(run) in str(err.value) and "changed" in str(err.value)
    again = comparison()
    again.prepare(["ANN", "JJA"])
    for season in ("ANN", "JJA"):
        diff = again.season_series("r", season) - again.season_series("o", season)
        np.testing.assert_allclose(diff.values, 5.0, rtol=0, atol=1e-4)  # float32 values in the file
