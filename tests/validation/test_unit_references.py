"""Unit conversion against pint's own default registry, and through the command line.

The reference is a fresh ``pint.UnitRegistry()`` (pint's definitions file), independent
of the cf-xarray registry the tool reads CF strings with.  Precipitation: a mass flux of
1 kg m-2 s-1 is 86 400 mm/day of liquid water (common practice, density 1000 kg m-3).
"""

from __future__ import annotations

import dask.array as dsa
import numpy as np
import pint
import pytest

from evaluation.errors import InputError
from evaluation.io import open_source
from evaluation.units import conversion, convert, trend_units

UREG = pint.UnitRegistry()
X = np.array([-40.0, 0.0, 1e-5, 15.5, 273.15, 301.25])

# (CF string the tool reads, pint expression of the same unit)
PAIRS = [
    (("K", "kelvin"), ("degC", "degree_Celsius")),
    (("degC", "degree_Celsius"), ("K", "kelvin")),
    (("degF", "degree_Fahrenheit"), ("K", "kelvin")),
    (("K", "kelvin"), ("degF", "degree_Fahrenheit")),
    (("Pa", "pascal"), ("hPa", "hectopascal")),
    (("hPa", "hectopascal"), ("Pa", "pascal")),
    (("mbar", "millibar"), ("Pa", "pascal")),
    (("m s-1", "meter / second"), ("km h-1", "kilometer / hour")),
    (("W m-2", "watt / meter ** 2"), ("mW m-2", "milliwatt / meter ** 2")),
    (("g kg-1", "gram / kilogram"), ("1", "dimensionless")),
    (("%", "percent"), ("1", "dimensionless")),
    (("kg m-2", "kilogram / meter ** 2"), ("g m-2", "gram / meter ** 2")),
    (("mm day-1", "millimeter / day"), ("m s-1", "meter / second")),
]


@pytest.mark.parametrize(("source", "target"), PAIRS, ids=[f"{a[0]}->{b[0]}" for a, b in PAIRS])
def test_conversion_matches_pint(source, target):
    # Source: pint's default registry (pint.UnitRegistry()), including the offsets of
    # degC and degF; rtol 1e-12 (atol 1e-9 for values that convert to about zero).
    a, b = conversion(source[0], target[0])
    expected = UREG.Quantity(X, source[1]).to(target[1]).magnitude
    np.testing.assert_allclose(a * X + b, expected, rtol=1e-12, atol=1e-9)


WATER = UREG.Quantity(1000.0, "kilogram / meter ** 3")  # liquid water (common practice)


@pytest.mark.parametrize(("source", "target", "pint_source", "pint_target"), [
    ("kg m-2 s-1", "mm day-1", "kilogram / meter ** 2 / second", "millimeter / day"),
    ("kg m-2 s-1", "mm h-1", "kilogram / meter ** 2 / second", "millimeter / hour"),
    ("kg m-2 day-1", "mm day-1", "kilogram / meter ** 2 / day", "millimeter / day"),
])
def test_precipitation_mass_flux_to_depth_rate(source, target, pint_source, pint_target):
    # Source: common practice, depth = mass / (1000 kg m-3); pint for the arithmetic; rtol 1e-12.
    a, b = conversion(source, target)
    expected = (UREG.Quantity(1.0, pint_source) / WATER).to(pint_target).magnitude
    assert b == 0.0
    assert a == pytest.approx(expected, rel=1e-12)
    back, offset = conversion(target, source)
    assert back * a == pytest.approx(1.0, rel=1e-12) and offset == 0.0


def test_one_kg_per_square_metre_per_second_is_86400_mm_per_day():
    # Source: common practice (water density 1000 kg m-3; 86 400 s in a day); exact.
    assert conversion("kg m-2 s-1", "mm day-1") == pytest.approx((86400.0, 0.0), rel=1e-15)


def test_convert_stays_lazy_and_matches_pint(nc_file, grid_factory, times_factory):
    # Source: pint's default registry applied to the numbers read from the file; rtol 1e-12.
    grid = grid_factory(30.0, 60.0)
    times = times_factory(2000, 2000, "noleap")
    data = 2e-5 * (1.0 + np.cos(np.arange(12.0)))[:, None, None] * np.ones((1, 6, 6))
    path = nc_file("pr.nc", {"pr": (data, {"units": "kg m-2 s-1", "standard_name": "precipitation_flux"})}, grid=grid, times=times)
    pr = open_source(str(path))["pr"]
    assert isinstance(pr.data, dsa.Array)
    out = convert(pr, "mm day-1")
    assert isinstance(out.data, dsa.Array) and out.attrs["units"] == "mm day-1"
    expected = (UREG.Quantity(data, "kilogram / meter ** 2 / second") / WATER).to("millimeter / day").magnitude
    np.testing.assert_allclose(out.values, expected, rtol=1e-12)


@pytest.mark.parametrize(("source", "target"), [("K", "kg m-2 s-1"), ("W m-2", "K"), ("Pa", "m s-1")])
def test_incompatible_units_are_refused(source, target):
    # Source: pint's dimensional analysis refuses the same pairs (DimensionalityError).
    with pytest.raises(pint.DimensionalityError):
        UREG.Quantity(1.0, {"K": "kelvin", "W m-2": "watt / meter ** 2", "Pa": "pascal"}[source]).to(
            {"kg m-2 s-1": "kilogram / meter ** 2 / second", "K": "kelvin", "m s-1": "meter / second"}[target])
    with pytest.raises(InputError):
        conversion(source, target)


def test_a_trend_in_celsius_is_kelvin_per_decade():
    # Source: pint, a temperature difference of 1 delta_degC is 1 kelvin; common practice
    # to state trends per decade.
    assert UREG.Quantity(1.0, "delta_degC").to("kelvin").magnitude == 1.0
    assert trend_units("degC") == "K/decade"
    assert trend_units("K") == "K/decade"


def test_cli_converts_runs_into_the_reference_units(nc_file, grid_factory, times_factory, score_cli):
    # Source: pint's default registry (kg m-2 s-1 -> mm/day through 1000 kg m-3; degC ->
    # K) applied by hand to the analytic fields; fields uniform in space and constant in
    # time, so every mean is the field value; rtol 1e-12.
    grid = grid_factory(15.0, 30.0)
    times = times_factory(2001, 2002, "standard")
    shape = (len(times), grid["lat"].size, grid["lon"].size)
    ref_flux = 3.0e-5  # kg m-2 s-1
    run_depth = 2.9  # mm/day
    ref = nc_file("pr_ref.nc", {"pr": (np.full(shape, ref_flux), {"units": "kg m-2 s-1", "standard_name": "precipitation_flux"})},
                  grid=grid, times=times)
    run = nc_file("pr_run.nc", {"pr": (np.full(shape, run_depth), {"units": "mm day-1", "standard_name": "precipitation_flux"})},
                  grid=grid, times=times)
    table = score_cli(["--reference", f"obs={ref}", "--model", f"run-p={run}", "--variable", "pr"])
    v = dict(zip(table["metric"], table["value"], strict=True))
    assert set(table.loc[table["metric"].isin(["mean", "ref_mean", "bias", "rmse"]), "units"]) == {"mm day-1"}
    ref_mm_day = (UREG.Quantity(ref_flux, "kilogram / meter ** 2 / second") / WATER).to("millimeter / day").magnitude
    assert v["ref_mean"] == pytest.approx(ref_mm_day, rel=1e-12)
    assert v["mean"] == pytest.approx(run_depth, rel=1e-12)
    assert v["bias"] == pytest.approx(run_depth - ref_mm_day, rel=1e-10)

    ref_k, run_c = 288.0, 16.2
    ref = nc_file("tas_ref.nc", {"tas": (np.full(shape, ref_k), {"units": "K", "standard_name": "air_temperature"})}, grid=grid, times=times)
    run = nc_file("tas_run.nc", {"tas": (np.full(shape, run_c), {"units": "degC", "standard_name": "air_temperature"})}, grid=grid, times=times)
    table = score_cli(["--reference", f"obs={ref}", "--model", f"run-t={run}", "--variable", "tas"])
    v = dict(zip(table["metric"], table["value"], strict=True))
    run_k = UREG.Quantity(run_c, "degree_Celsius").to("kelvin").magnitude
    assert v["mean"] == pytest.approx(run_k, rel=1e-12)
    assert v["bias"] == pytest.approx(run_k - ref_k, rel=1e-9)
    assert set(table.loc[table["metric"] == "trend", "units"]) == {"K/decade"}
