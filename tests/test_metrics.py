"""Tests of evaluation.metrics against naive numpy, xskillscore and the published formulas
of Taylor (2001) and Gleckler et al. (2008), plus hypothesis invariants."""

from __future__ import annotations

import numpy as np
import pytest
import xarray as xr
import xskillscore as xs
from cfdata import exact_area, naive_pattern_stats
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays

from evaluation.errors import InputError
from evaluation.grid import infer_bounds
from evaluation.metrics import (
    METRICS,
    common_mask,
    pattern_stats,
    relative_errors,
    taylor_skill,
    weighted_mean,
    zonal_mean,
)

LAT = np.arange(-87.5, 90.0, 5.0)
LON = np.arange(-177.5, 180.0, 5.0)
AREA = exact_area(infer_bounds(LAT, kind="lat"), infer_bounds(LON, kind="lon"))


def field(values) -> xr.DataArray:
    return xr.DataArray(np.asarray(values, dtype=float), dims=("lat", "lon"), coords={"lat": LAT[: np.shape(values)[0]], "lon": LON[: np.shape(values)[1]]})


@pytest.fixture
def pair():
    rng = np.random.default_rng(7)
    lat = np.deg2rad(LAT)[:, None]
    ref = 288.0 + 30.0 * np.cos(lat) ** 2 + rng.normal(0, 1.0, (LAT.size, LON.size))
    mod = ref + 0.7 + 1.5 * np.sin(lat) + rng.normal(0, 0.8, ref.shape)
    return mod, ref


def test_pattern_stats_match_naive_numpy(pair):
    mod, ref = pair
    got = pattern_stats(field(mod), field(ref), field(AREA))
    for key, value in naive_pattern_stats(mod, ref, AREA).items():
        assert got[key] == pytest.approx(value, rel=1e-12, abs=1e-12), key


def test_pattern_stats_match_xskillscore(pair):
    mod, ref = pair
    m, r, w = field(mod), field(ref), field(AREA)
    got = pattern_stats(m, r, w)
    # xskillscore's weighted Pearson r, RMSE and mean error (reference library)
    assert got["corr"] == pytest.approx(float(xs.pearson_r(m, r, dim=["lat", "lon"], weights=w)), rel=1e-10)
    assert got["rmse"] == pytest.approx(float(xs.rmse(m, r, dim=["lat", "lon"], weights=w)), rel=1e-10)
    assert got["bias"] == pytest.approx(float(xs.me(m, r, dim=["lat", "lon"], weights=w)), rel=1e-10)


def test_region_fractions_enter_as_weights(pair):
    mod, ref = pair
    frac = np.clip((LAT[:, None] + 30.0) / 60.0, 0.0, 1.0) * np.ones(LON.size)
    got = pattern_stats(field(mod), field(ref), field(AREA * frac))
    assert got["mean"] == pytest.approx(np.average(mod, weights=AREA * frac), rel=1e-13)


def test_one_common_mask(pair):
    mod, ref = pair
    mod = mod.copy()
    mod[5:9, 10:30] = np.nan  # cells missing in the run only
    got = pattern_stats(field(mod), field(ref), field(AREA))
    ok = np.isfinite(mod)
    # the reference's numbers leave out the cells the run lacks
    assert got["ref_mean"] == pytest.approx(np.average(ref[ok], weights=AREA[ok]), rel=1e-13)
    assert got["ref_mean"] != pytest.approx(np.average(ref, weights=AREA), rel=1e-9)
    for key, value in naive_pattern_stats(mod, ref, AREA).items():
        assert got[key] == pytest.approx(value, rel=1e-12), key


def test_common_mask():
    a = field([[1.0, np.nan], [3.0, 4.0]])
    b = field([[1.0, 2.0], [np.nan, 4.0]])
    np.testing.assert_array_equal(common_mask(a, b).values, [[True, False], [False, True]])


def test_all_nan_selection_is_an_input_error(pair):
    mod, ref = pair
    with pytest.raises(InputError, match="no valid cell") as err:
        pattern_stats(field(np.full_like(mod, np.nan)), field(ref), field(AREA), where="run-a, box")
    assert "run-a, box" in err.value.message
    with pytest.raises(InputError, match="no valid cell"):
        pattern_stats(field(mod), field(ref), field(AREA * 0.0))


def test_constant_reference_has_no_correlation(pair):
    mod, _ = pair
    got = pattern_stats(field(mod), field(np.full_like(mod, 5.0)), field(AREA))
    assert np.isnan(got["corr"]) and np.isnan(got["std_ratio"]) and np.isnan(got["taylor_skill"])
    assert got["bias"] == pytest.approx(np.average(mod, weights=AREA) - 5.0)


# ---------------------------------------------------------------------------- Taylor skill


@pytest.mark.parametrize(("corr", "ratio"), [(1.0, 1.0), (0.5, 2.0), (0.9, 0.8), (-0.3, 1.3), (0.0, 1.0)])
def test_taylor_skill_is_taylor_2001_eq_4(corr, ratio):
    # Taylor (2001), J. Geophys. Res. 106(D7), 7183, eq. (4): S = 4(1+R) / ((σ̂ + 1/σ̂)² (1+R0)), R0 = 1
    expected = 4 * (1 + corr) / ((ratio + 1 / ratio) ** 2 * 2)
    assert taylor_skill(corr, ratio) == pytest.approx(expected, rel=1e-14)


def test_taylor_skill_hand_values():
    assert taylor_skill(1.0, 1.0) == 1.0  # a perfect pattern scores one
    assert taylor_skill(0.5, 2.0) == pytest.approx(0.48)  # 4·1.5 / (2.5² · 2), by hand
    assert np.isnan(taylor_skill(0.5, 0.0)) and np.isnan(taylor_skill(np.nan, 1.0))


def test_taylor_skill_in_pattern_stats(pair):
    mod, ref = pair
    got = pattern_stats(field(mod), field(ref), field(AREA))
    assert got["taylor_skill"] == pytest.approx(4 * (1 + got["corr"]) / ((got["std_ratio"] + 1 / got["std_ratio"]) ** 2 * 2))


# ---------------------------------------------------------------------------- relative error


def test_relative_error_is_gleckler_2008():
    rmse = {"a": 1.0, "b": 2.0, "c": 4.0, "d": 3.0}
    med = np.median(list(rmse.values()))  # Gleckler et al. (2008), JGR 113, D06104: (E − median E) / median E
    got = relative_errors(rmse)
    for k, v in rmse.items():
        assert got[k] == pytest.approx((v - med) / med)


def test_relative_error_leaves_nan_out_of_the_median():
    got = relative_errors({"a": 1.0, "b": np.nan, "c": 3.0})
    assert got["a"] == pytest.approx(-0.5) and got["c"] == pytest.approx(0.5) and np.isnan(got["b"])
    assert np.isnan(relative_errors({"a": 0.0, "b": 0.0})["a"])
    assert relative_errors({"a": 2.0}) == {"a": 0.0}


# ---------------------------------------------------------------------------- weighted and zonal means


def test_weighted_mean_matches_numpy_average():
    rng = np.random.default_rng(3)
    x = rng.normal(size=(LAT.size, LON.size))
    x[0:3] = np.nan
    got = float(weighted_mean(field(x), field(AREA)))
    ok = np.isfinite(x)
    assert got == pytest.approx(np.average(x[ok], weights=AREA[ok]), rel=1e-13)
    assert np.isnan(float(weighted_mean(field(np.full_like(x, np.nan)), field(AREA))))


def test_zonal_mean_is_the_mean_along_longitude_without_missing_cells():
    rng = np.random.default_rng(4)
    x = rng.normal(size=(LAT.size, LON.size))
    x[2, :10] = np.nan
    x[3, :] = np.nan
    got = zonal_mean(field(x)).values
    with np.errstate(invalid="ignore"), pytest.warns(RuntimeWarning):
        expected = np.nanmean(x, axis=1)  # equal cell widths: the plain mean of valid cells
    np.testing.assert_allclose(got, expected, rtol=1e-13)


# ---------------------------------------------------------------------------- registry


def test_metric_registry_matches_the_contract():
    # shared/DESIGN.md: the tidy table's metrics, and units '1' for unitless ones, K/decade for trends
    assert list(METRICS) == [
        "mean", "ref_mean", "bias", "rmse", "crmse", "corr", "std_ratio", "taylor_skill",
        "trend", "ref_trend", "trend_pvalue", "ref_trend_pvalue", "iav_ratio", "rel_error",
        "bias_signif_area", "rmse_diff_lo", "rmse_diff_hi", "abs_bias_diff_lo", "abs_bias_diff_hi",
    ]  # fmt: skip
    units = {k: m.units("K") for k, m in METRICS.items()}
    assert units["trend"] == units["ref_trend"] == "K/decade"
    assert {k for k, u in units.items() if u == "1"} == {"corr", "std_ratio", "taylor_skill", "trend_pvalue", "ref_trend_pvalue", "iav_ratio", "rel_error",
                                                         "bias_signif_area"}
    assert {k for k, u in units.items() if u == "K"} == {"mean", "ref_mean", "bias", "rmse", "crmse", "rmse_diff_lo", "rmse_diff_hi",
                                                         "abs_bias_diff_lo", "abs_bias_diff_hi"}


# ---------------------------------------------------------------------------- invariants

SHAPE = (6, 8)
values = arrays(np.float64, SHAPE, elements=st.floats(-1e3, 1e3, allow_nan=False, width=64))
weights = arrays(np.float64, SHAPE, elements=st.floats(0.01, 10.0, width=64))


def _grid(a):
    return xr.DataArray(a, dims=("lat", "lon"))


def _varied(a) -> bool:
    return float(np.ptp(a)) > 1e-3


@settings(max_examples=60, deadline=None)
@given(values, weights)
def test_a_field_against_itself(m, w):
    got = pattern_stats(_grid(m), _grid(m.copy()), _grid(w))
    # identity: zero bias and errors (common practice)
    assert got["bias"] == 0.0 and got["rmse"] == 0.0 and got["crmse"] == 0.0
    if _varied(m):
        assert got["corr"] == pytest.approx(1.0, abs=1e-9)
        assert got["std_ratio"] == pytest.approx(1.0, abs=1e-12)
        assert got["taylor_skill"] == pytest.approx(1.0, abs=1e-9)


@settings(max_examples=80, deadline=None)
@given(values, values, weights)
def test_taylor_identities(m, r, w):
    got = pattern_stats(_grid(m), _grid(r), _grid(w))
    scale = max(1.0, float(np.abs(m).max()), float(np.abs(r).max())) ** 2
    # rmse² = bias² + crmse² (Taylor 2001, eq. 2 with the mean removed)
    assert got["rmse"] ** 2 == pytest.approx(got["bias"] ** 2 + got["crmse"] ** 2, abs=1e-9 * scale)
    if _varied(m) and _varied(r):
        # law of cosines: crmse² = σm² + σr² − 2 σm σr R (Taylor 2001, eq. 1)
        law = got["std"] ** 2 + got["ref_std"] ** 2 - 2 * got["std"] * got["ref_std"] * got["corr"]
        assert got["crmse"] ** 2 == pytest.approx(law, abs=1e-9 * scale)
        # Cauchy-Schwarz: |R| ≤ 1
        assert -1.0 - 1e-12 <= got["corr"] <= 1.0 + 1e-12
        assert 0.0 <= got["taylor_skill"] <= 1.0 + 1e-12


@settings(max_examples=60, deadline=None)
@given(values, st.floats(-50, 50), weights)
def test_bias_of_a_shifted_field(r, shift, w):
    got = pattern_stats(_grid(r + shift), _grid(r), _grid(w))
    assert got["bias"] == pytest.approx(shift, abs=1e-9)
    assert got["crmse"] == pytest.approx(0.0, abs=1e-7)


@settings(max_examples=60, deadline=None)
@given(st.lists(st.floats(0.01, 1e3), min_size=1, max_size=12))
def test_median_relative_error_is_zero(errors):
    got = relative_errors({f"run-{i}": e for i, e in enumerate(errors)})
    # (E − med)/med is increasing in E, so the median maps to zero (Gleckler et al. 2008)
    assert np.median(list(got.values())) == pytest.approx(0.0, abs=1e-12)
