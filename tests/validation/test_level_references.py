"""Vertical levels against outside references: numpy.interp, pint, numpy.trapezoid, algebra.

Each check names its source beside it.  Files are real NetCDF files written by
tests/leveldata.py; gridscore reads them as a user's files.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
import xarray as xr
from leveldata import write_levels

from evaluation import io, levels
from evaluation.scoring import Comparison, Source

PRESSURES = (1000.0, 925.0, 850.0, 700.0, 500.0, 300.0, 200.0, 100.0)


def wavy(level, lat, lon, month):
    """A field that is not linear in ln p, so the interpolation rule matters."""
    return 250.0 + 20.0 * np.sin(np.log(level) * 3.0 + np.radians(lat)) + 5.0 * np.cos(np.radians(lon)) + month


def read(path: Path) -> xr.DataArray:
    return io.get_variable(io.open_source([str(path)], source="src"), "ta", source="src")


def test_log_pressure_interpolation_matches_numpy_interp_on_ln_p(tmp_path: Path) -> None:
    # Source: numpy.interp (piecewise-linear interpolation) applied to ln p, column by
    # column, the textbook definition of "linear in log-pressure" (common practice).
    da = read(write_levels(tmp_path / "f.nc", levels=PRESSURES, field=wavy, years=1)).isel(time=slice(0, 2)).load()
    targets = np.array([990.0, 850.0, 777.7, 400.0, 123.4])
    ours = levels.interpolate_levels(da, targets, units="hPa").values
    ln_p = np.log(np.asarray(PRESSURES))[::-1]  # numpy.interp needs ascending x
    columns = da.transpose("time", "lat", "lon", "level").values[..., ::-1]
    expected = np.apply_along_axis(lambda col: np.interp(np.log(targets), ln_p, col), -1, columns)
    np.testing.assert_allclose(np.moveaxis(ours, 1, -1), expected, rtol=0, atol=1e-10)


def test_a_plus_b_ln_p_is_exact_between_levels(tmp_path: Path) -> None:
    # Algebra: a function linear in ln p is reproduced exactly by interpolation linear in ln p.
    a, b = 288.0, 29.3  # 29.3 K per e-folding of pressure: R_d T / g scale of an isothermal layer (value from memory)
    da = read(write_levels(tmp_path / "f.nc", levels=PRESSURES, field=lambda p, *rest: a + b * np.log(p / 1000.0) + 0.0 * rest[0], years=1))
    for wanted in (960.0, 600.0, 250.0, 150.0):
        out = levels.select_level(da, f"{wanted}hPa", source="s")
        np.testing.assert_allclose(out.values, a + b * np.log(wanted / 1000.0), rtol=0, atol=1e-9)


def test_height_interpolation_is_linear_in_height(tmp_path: Path) -> None:
    # Algebra: a field linear in height (a constant lapse rate, 6.5 K/km: the ICAO standard
    # atmosphere's troposphere, value from memory) is exact under linear interpolation in z.
    heights = (2.0, 10.0, 100.0, 500.0, 1500.0, 3000.0)
    field = lambda z, lat, lon, m: 288.15 - 0.0065 * z + 0.0 * lat  # noqa: E731
    da = read(write_levels(tmp_path / "f.nc", levels=heights, axis_attrs={"units": "m", "positive": "up"}, field=field, years=1))
    for wanted in ("50m", "1km", "2500 m"):
        z = levels.parse_level(wanted).value_in("m")
        np.testing.assert_allclose(levels.select_level(da, wanted, source="s").values, 288.15 - 0.0065 * z, atol=1e-9)


def test_depth_interpolation_matches_numpy_interp_in_depth(tmp_path: Path) -> None:
    # Source: numpy.interp along depth (linear in the coordinate itself).
    depths = (5.0, 15.0, 50.0, 120.0, 500.0)
    da = read(write_levels(tmp_path / "f.nc", levels=depths, axis_attrs={"units": "m", "positive": "down"}, field=wavy, years=1)).load()
    ours = levels.select_level(da, "80m", source="s").values
    expected = np.apply_along_axis(lambda col: np.interp(80.0, depths, col), 1, da.transpose("time", "level", "lat", "lon").values)
    np.testing.assert_allclose(ours, expected, atol=1e-10)


@pytest.mark.parametrize(("text", "units", "value"), [("850hPa", "Pa", 85000.0), ("85000Pa", "hPa", 850.0), ("850 mbar", "kPa", 85.0), ("2 km", "m", 2000.0)])
def test_level_units_convert_as_pint_says(text: str, units: str, value: float) -> None:
    # Source: pint's own default registry (independent of the CF-aware registry gridscore uses).
    import pint

    request = levels.parse_level(text)
    assert request.value_in(units) == pytest.approx(pint.UnitRegistry().Quantity(request.value, request.units).to(units).magnitude, rel=1e-12)
    assert request.value_in(units) == pytest.approx(value, rel=1e-12)  # SI prefixes (BIPM SI brochure)


def test_section_score_matches_the_formula_by_hand() -> None:
    # bias = Σ w (m − r) / Σ w and rmse = sqrt(Σ w (m − r)² / Σ w), w = Δp · Δ sin φ
    # (mass-weighting by Δp: common practice for pressure-level diagnostics; band area
    # 2πR²·Δ sin φ: Archimedes' hat-box theorem).  Δp by the trapezoidal rule, written out.
    p = np.array([1000.0, 850.0, 500.0, 200.0])
    lat_bnds = np.array([[-90.0, -30.0], [-30.0, 0.0], [0.0, 30.0], [30.0, 90.0]])
    lat = lat_bnds.mean(axis=1)
    rng = np.random.default_rng(7)
    m, r = rng.normal(250.0, 10.0, (4, 4)), rng.normal(250.0, 10.0, (4, 4))
    r[0, 1] = np.nan  # below the surface: left out of both sums
    coords = {"level": ("level", p, {"units": "hPa", "level_kind": "pressure"}), "lat": lat}
    run, ref = (xr.DataArray(x, dims=("level", "lat"), coords=coords) for x in (m, r))
    w = levels.section_weights(ref, lat_bnds)
    dp = np.array([1000.0 - 925.0, 925.0 - 675.0, 675.0 - 350.0, 350.0 - 200.0])  # half-way edges
    band = np.sin(np.radians(lat_bnds[:, 1])) - np.sin(np.radians(lat_bnds[:, 0]))
    hand_w = dp[:, None] * band[None, :]
    np.testing.assert_allclose(w.values, hand_w, rtol=1e-14)
    ok = np.isfinite(r)
    d = (m - r)[ok]
    got = levels.section_scores(run, ref, w)
    assert got["bias"] == pytest.approx(np.sum(hand_w[ok] * d) / np.sum(hand_w[ok]), rel=1e-13)
    assert got["rmse"] == pytest.approx(np.sqrt(np.sum(hand_w[ok] * d**2) / np.sum(hand_w[ok])), rel=1e-13)


def test_delta_p_weights_are_the_trapezoidal_rule() -> None:
    # Source: numpy.trapezoid.  A Δp-weighted mean over the levels equals the trapezoidal
    # vertical integral divided by the pressure range.
    p = np.array([1000.0, 925.0, 850.0, 700.0, 500.0, 250.0, 100.0])
    f = np.cos(p / 300.0) + p / 1000.0
    section = xr.DataArray(f[:, None], dims=("level", "lat"), coords={"level": p, "lat": [0.0]})
    w = levels.section_weights(section, np.array([[-10.0, 10.0]]))[:, 0].values
    assert np.sum(w * f) / np.sum(w) == pytest.approx(np.trapezoid(f[::-1], p[::-1]) / (p.max() - p.min()), rel=1e-13)


def test_section_of_a_log_linear_field_is_exact_across_level_sets(tmp_path: Path) -> None:
    # Algebra: with T = a + b ln p in both sources and the run 0.5 K warmer, every section
    # cell the run covers differs by exactly 0.5 K, so bias = rmse = 0.5 whatever the weights.
    field = lambda p, lat, lon, m: 230.0 + 35.0 * np.cos(np.radians(lat)) + 30.0 * np.log(p / 1000.0) + 0.0 * lon  # noqa: E731
    ref = write_levels(tmp_path / "ref.nc", levels=PRESSURES, field=field)
    run = write_levels(tmp_path / "run.nc", levels=(1000.0, 800.0, 600.0, 400.0, 150.0), field=lambda *a: field(*a) + 0.5)
    cmp = Comparison(reference=Source("ref", "reference", [str(ref)]), models=[Source("run", "model", [str(run)])], variable="ta", level="500hPa", cache=False)
    section = cmp.zonal_section("run", "ANN")
    inside = section["level"].values >= 150.0
    np.testing.assert_allclose(section["difference"].values[inside], 0.5, atol=1e-9)
    assert np.isnan(section["difference"].values[~inside]).all()  # 100 hPa: above the run's top level
    assert section.attrs["bias"] == pytest.approx(0.5, abs=1e-9)
    assert section.attrs["rmse"] == pytest.approx(0.5, abs=1e-9)


def test_column_interpolation_matches_numpy_interp_in_every_column() -> None:
    # Source: numpy.interp on ln p, one column at a time, for pressures that differ per
    # column (model levels with the pressure of every level) and either level order.
    rng = np.random.default_rng(3)
    sigma = np.array([0.1, 0.25, 0.45, 0.65, 0.8, 0.92, 0.99])
    ps = rng.uniform(70000.0, 103000.0, size=(5, 6))
    pressure = sigma[None, None, :] * ps[..., None]
    values = rng.normal(250.0, 20.0, size=pressure.shape)
    for target in (30000.0, 50000.0, 85000.0, 100000.0):
        ours = levels._column_kernel(values, pressure, target)
        reversed_order = levels._column_kernel(values[..., ::-1], pressure[..., ::-1], target)
        for i in range(ps.shape[0]):
            for j in range(ps.shape[1]):
                ln_p = np.log(pressure[i, j])
                inside = ln_p[0] <= np.log(target) <= ln_p[-1]
                expected = np.interp(np.log(target), ln_p, values[i, j]) if inside else np.nan
                np.testing.assert_allclose(ours[i, j], expected, atol=1e-10)
                np.testing.assert_allclose(reversed_order[i, j], expected, atol=1e-10)
