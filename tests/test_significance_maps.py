"""Stippling of bias and trend maps, the significant-area metric and the bootstrap rows of
the score table, on real NetCDF files (tests/cfdata.py).  Outside references:
scipy.stats.linregress, statsmodels (acf, multipletests with fdr_bh), exact spherical cell
areas, and the CF conventions' flag attributes (CF 1.10 section 3.5)."""

from __future__ import annotations

import numpy as np
import pytest
import xarray as xr
from cfdata import exact_area, write_cf
from scipy import stats
from statsmodels.stats.multitest import multipletests
from statsmodels.tsa.stattools import acf

from evaluation.export import field_bytes
from evaluation.scoring import Comparison, Source
from evaluation.significance import trend_test


def field(seed: float, *, bump: float = 0.0, trend: float = 0.0):
    def f(lat, lon, year, month):
        phi, lam = np.deg2rad(lat), np.deg2rad(lon)
        return (
            260.0 + 25.0 * np.cos(phi) ** 2 - 8.0 * np.sin(phi) * np.cos(2 * np.pi * (month - 1) / 12.0)
            + 0.6 * np.sin(78.233 * year * (1.0 + 0.1 * seed) + seed + 3.0 * lam) * np.cos(phi + seed)  # little persistence
            + bump * (np.abs(lat) < 30.0)
            + trend * (year - 1991) * (lat > 0)
        )

    return f


@pytest.fixture(scope="module")
def comparison(tmp_path_factory) -> Comparison:
    tmp = tmp_path_factory.mktemp("stippling")
    common = dict(dlat=15.0, start_year=1991, years=12, dtype="float64")
    ref = write_cf(tmp / "ref.nc", field=field(0.0), **common)
    run = write_cf(tmp / "run.nc", field=field(1.7, bump=1.5, trend=0.2), **common)
    other = write_cf(tmp / "other.nc", field=field(2.9, bump=0.4), **common)
    return Comparison(reference=Source("ref", "reference", [str(ref)]),
                      models=[Source("run", "model", [str(run)]), Source("other", "model", [str(other)])],
                      variable="tas", period="1992-2002", cache=False)


def test_trend_test_without_adjustment_is_linregress() -> None:
    # scipy.stats.linregress: slope and two-sided p-value of the classical OLS t-test
    rng = np.random.default_rng(1)
    y = rng.standard_normal((25, 8)).cumsum(axis=0) * 0.3 + 0.05 * np.arange(25)[:, None]
    da = xr.DataArray(y, dims=("year", "cell"), coords={"year": np.arange(1990, 2015)})
    got = trend_test(da, adjust=False)
    for cell in range(8):
        ref = stats.linregress(np.arange(1990, 2015), y[:, cell])
        assert got["slope"].values[cell] == pytest.approx(ref.slope, rel=1e-10)
        assert got["pvalue"].values[cell] == pytest.approx(ref.pvalue, rel=1e-8)


def test_trend_test_follows_santer_with_statsmodels_autocorrelation() -> None:
    # Santer et al. (2000): r1 of the residuals (statsmodels acf), n_e = n (1 - r1)/(1 + r1) when r1 > 0,
    # s_e^2 = sum(e^2)/(n_e - 2), t with n_e - 2 degrees of freedom
    rng = np.random.default_rng(2)
    y = rng.standard_normal((30, 12)).cumsum(axis=0) * 0.2 + rng.standard_normal((30, 12))
    x = np.arange(30.0)
    got = trend_test(xr.DataArray(y, dims=("year", "cell"), coords={"year": x}))
    for cell in range(12):
        slope, intercept = np.polyfit(x, y[:, cell], 1)
        e = y[:, cell] - (intercept + slope * x)
        r1 = acf(e, nlags=1, fft=False)[1]
        n_e = 30 * (1 - r1) / (1 + r1) if r1 > 0 else 30.0
        se = np.sqrt((e @ e) / (n_e - 2) / ((x - x.mean()) @ (x - x.mean())))
        expected = 2 * stats.t.sf(abs(slope / se), n_e - 2) if n_e > 2 else np.nan
        assert got["n_eff"].values[cell] == pytest.approx(n_e, rel=1e-9)
        np.testing.assert_allclose(got["pvalue"].values[cell], expected, rtol=1e-8)


def test_trend_stippling_is_benjamini_hochberg_over_the_map(comparison) -> None:
    got = comparison.trend_significance("run", "ANN")
    p = got["pvalue"].values.ravel()
    finite = np.isfinite(p)
    reject = multipletests(p[finite], alpha=0.10, method="fdr_bh")[0]  # statsmodels
    assert got["significant"].values.ravel()[finite].tolist() == reject.tolist()
    # the northern trend of 0.2 K/year stands out, the south (no trend) hardly
    lat = got["lat"].broadcast_like(got["pvalue"]).values
    sig = got["significant"].values
    assert sig[lat > 0].mean() > 0.8 and sig[lat < 0].mean() < 0.3


def test_flags_are_cf_flag_variables(comparison) -> None:
    # CF 1.10 section 3.5: flag_values of the variable's type, one blank-separated word of
    # flag_meanings per value
    for of, name in (("difference", "run"), ("trend_map", "run"), ("trend_map", "ref")):
        flags = comparison.significance_mask(name, "ANN", of=of)
        values, meanings = flags.attrs["flag_values"], flags.attrs["flag_meanings"].split(" ")
        assert flags.dtype == values.dtype == np.int8 and len(values) == len(meanings) == 3
        assert set(np.unique(flags.values)) <= set(values.tolist())
    test = comparison.difference_significance("run", "ANN")
    flags = comparison.significance_mask("run", "ANN", of="difference")
    assert ((flags.values == 2) == test["significant"].values).all()
    assert ((flags.values == 0) == np.isnan(test["pvalue"].values)).all()


def test_field_download_carries_the_flags(comparison, tmp_path) -> None:
    from app.views.maps import with_mask

    field = comparison.difference("run", "ANN")
    flags = comparison.significance_mask("run", "ANN", of="difference")
    payload = field_bytes(with_mask(field, flags, "tas"), provenance=None)
    (tmp_path / "field.nc").write_bytes(payload)
    back = xr.open_dataset(tmp_path / "field.nc", decode_cf=False)
    assert back[str(field.name)].attrs["ancillary_variables"] == str(flags.name)
    assert back[str(flags.name)].dtype == np.int8
    assert back[str(flags.name)].attrs["flag_meanings"] == "not_tested not_significant significant"
    np.testing.assert_array_equal(np.asarray(back[str(flags.name)].values).squeeze(), flags.values)
    # gridscore check reads the download: the field can be scored, the flag variable (CF: no
    # units needed) is named as a mask, not refused for want of units
    from evaluation.checking import check_file

    report = check_file(str(tmp_path / "field.nc"))
    assert report.can_score, report.problems
    assert [v["name"] for v in report.variables] == [str(field.name)]
    assert any(str(flags.name) in note for note in report.notes)


def test_significant_area_row_is_the_stippled_area(comparison) -> None:
    # Benjamini-Hochberg over the map (statsmodels), area fractions from exact spherical cell areas
    table = comparison.scores(regions=["global", "tropics"], seasons=["ANN"])
    test = comparison.difference_significance("run", "ANN")
    p = test["pvalue"].values
    finite = np.isfinite(p)
    reject = np.zeros(p.shape, dtype=bool)
    reject[finite] = multipletests(p[finite], alpha=0.10, method="fdr_bh")[0]
    grid = comparison.climatology("ref", "ANN")
    lat_edges = np.concatenate([[-90.0], 0.5 * (grid["lat"].values[1:] + grid["lat"].values[:-1]), [90.0]])
    lon = grid["lon"].values
    lon_edges = np.concatenate([[lon[0] - (lon[1] - lon[0]) / 2], 0.5 * (lon[1:] + lon[:-1]), [lon[-1] + (lon[1] - lon[0]) / 2]])
    area = exact_area(np.stack([lat_edges[:-1], lat_edges[1:]], 1), np.stack([lon_edges[:-1], lon_edges[1:]], 1))
    row = table[(table.model == "run") & (table.metric == "bias_signif_area")].set_index("region")["value"]
    assert row["global"] == pytest.approx(float((area * reject).sum() / (area * finite).sum()), rel=1e-9)
    assert (table.loc[table.metric == "bias_signif_area", "units"] == "1").all()


def test_confirmed_best_names_the_clearly_better_run(comparison) -> None:
    # the run with a 0.4 K bump against the one with 1.5 K: better in RMSE and |bias| by far more
    # than the years' noise, so it is the one run marked (evaluation.bootstrap.BEST_RULE)
    from evaluation.bootstrap import confirmed_best

    best = confirmed_best(comparison.scores(regions=["global"], seasons=["ANN"]))
    assert sorted(best["metric"]) == ["bias", "rel_error", "rmse"] and set(best["model"]) == {"other"}
    # the provenance states the same rule the command line prints and the score page shows
    from evaluation.bootstrap import BEST_RULE

    assert comparison.provenance()["significance"]["best_rule"] == BEST_RULE


def test_interval_rows(comparison) -> None:
    table = comparison.scores(regions=["global"], seasons=["ANN"])
    wide = table.pivot_table(index="model", columns="metric", values="value")
    for metric in ("rmse_diff_lo", "rmse_diff_hi", "abs_bias_diff_lo", "abs_bias_diff_hi"):
        assert (table.loc[table.metric == metric, "units"] == "K").all()
    # two runs: each is the other's competitor and both are drawn over the same years, so the
    # intervals of run - other and other - run are mirror images
    assert wide.loc["run", "rmse_diff_lo"] == pytest.approx(-wide.loc["other", "rmse_diff_hi"], rel=1e-12)
    assert wide.loc["run", "abs_bias_diff_hi"] == pytest.approx(-wide.loc["other", "abs_bias_diff_lo"], rel=1e-12)
    # the run with the 1.5 K tropical bump is clearly worse than the one with 0.4 K
    assert wide.loc["run", "rmse_diff_lo"] > 0 and wide.loc["other", "rmse_diff_hi"] < 0


def test_dots_are_thinned_by_block_majority_on_fine_grids() -> None:
    # a 1° flag field: blocks of 5 x 5 cells (36 x 72 dots at most); a dot where more than half of
    # a block's tested cells are significant, at the block's centre, rebuilt with numpy reshapes
    # (common practice for stippling fine grids)
    from app.views.maps import stipple_points

    rng = np.random.default_rng(9)
    lat, lon = np.arange(-89.5, 90, 1.0), np.arange(0.5, 360, 1.0)
    flags = rng.choice(np.array([0, 1, 2], dtype="int8"), size=(180, 360), p=[0.1, 0.5, 0.4])
    flags[:60, :120] = 2  # a clearly significant patch
    lon_dots, lat_dots = stipple_points(xr.DataArray(flags, dims=("lat", "lon"), coords={"lat": lat, "lon": lon}))
    blocks = lambda a: a.reshape(36, 5, 72, 5).sum(axis=(1, 3))  # noqa: E731
    share = blocks((flags == 2).astype(float)) / np.maximum(blocks((flags > 0).astype(float)), 1)
    rows, cols = np.nonzero(share > 0.5)
    expected = sorted(zip(lon.reshape(72, 5).mean(axis=1)[cols], lat.reshape(36, 5).mean(axis=1)[rows], strict=True))
    np.testing.assert_allclose(np.array(sorted(zip(lon_dots, lat_dots, strict=True))), np.array(expected), rtol=0, atol=1e-9)
    assert len(expected) >= 12 * 24  # the patch is dotted whole
    # a 2.5° grid or coarser keeps one dot per significant cell
    coarse = xr.DataArray(flags[:36, :72], dims=("lat", "lon"), coords={"lat": lat[:36], "lon": lon[:72]})
    assert len(stipple_points(coarse)[0]) == int((flags[:36, :72] == 2).sum())
