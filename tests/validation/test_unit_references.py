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
import xarray as xr

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


# ---------------------------------------------------------------------------- spellings in real files

# Each spelling files carry, with what it means written as a pint expression by hand
# (not taken from evaluation.units), and the SI unit of its quantity.  Source: pint's
# default registry for the arithmetic; the meanings are common practice in climate files.
KELVIN, PASCAL, MS, FLUX, WM2, ONE = "kelvin", "pascal", "meter / second", "kilogram / meter ** 2 / second", "watt / meter ** 2", "dimensionless"
MEANINGS = {
    "deg C": ("degree_Celsius", KELVIN), "deg. C": ("degree_Celsius", KELVIN), "degrees C": ("degree_Celsius", KELVIN),
    "degree_C": ("degree_Celsius", KELVIN), "degC": ("degree_Celsius", KELVIN), "Celsius": ("degree_Celsius", KELVIN),
    "degrees Celsius": ("degree_Celsius", KELVIN), "°C": ("degree_Celsius", KELVIN), "deg_C": ("degree_Celsius", KELVIN),
    "deg K": ("kelvin", KELVIN), "degrees K": ("kelvin", KELVIN), "K": ("kelvin", KELVIN), "kelvin": ("kelvin", KELVIN),
    "degK": ("kelvin", KELVIN),
    "degF": ("degree_Fahrenheit", KELVIN), "deg F": ("degree_Fahrenheit", KELVIN), "Fahrenheit": ("degree_Fahrenheit", KELVIN),
    "mb": ("millibar", PASCAL), "mbar": ("millibar", PASCAL), "millibars": ("millibar", PASCAL), "hPa": ("hectopascal", PASCAL),
    "Pa": ("pascal", PASCAL), "N m-2": ("newton / meter ** 2", PASCAL),
    "mm/day": ("millimeter / day", MS), "mm d-1": ("millimeter / day", MS), "mm day-1": ("millimeter / day", MS),
    "mm/s": ("millimeter / second", MS), "mm/h": ("millimeter / hour", MS),
    "kg/m2/s": ("kilogram / meter ** 2 / second", FLUX), "kg m-2 s-1": ("kilogram / meter ** 2 / second", FLUX),
    "kg m**-2 s**-1": ("kilogram / meter ** 2 / second", FLUX),
    "W/m^2": ("watt / meter ** 2", WM2), "W/m2": ("watt / meter ** 2", WM2), "W m**-2": ("watt / meter ** 2", WM2),
    "W m-2": ("watt / meter ** 2", WM2),
    "fraction": ("dimensionless", ONE), "percent": ("percent", ONE), "%": ("percent", ONE), "1": ("dimensionless", ONE),
    "g/kg": ("gram / kilogram", ONE), "kg/kg": ("kilogram / kilogram", ONE), "g kg-1": ("gram / kilogram", ONE),
    "kg kg-1": ("kilogram / kilogram", ONE),
    "m/s": ("meter / second", MS), "ms-1": ("meter / second", MS), "m s-1": ("meter / second", MS), "m s**-1": ("meter / second", MS),
    "gpm": ("meter", "meter"), "m": ("meter", "meter"),
    "sec": ("second", "second"), "s": ("second", "second"), "day": ("day", "second"), "d": ("day", "second"),
    "mb/day": ("millibar / day", "pascal / second"), "hPa/day": ("hectopascal / day", "pascal / second"),
}
SI_CF = {KELVIN: "K", PASCAL: "Pa", MS: "m s-1", FLUX: "kg m-2 s-1", WM2: "W m-2", ONE: "1", "meter": "m", "second": "s", "pascal / second": "Pa s-1"}


@pytest.mark.parametrize("spelling", sorted(MEANINGS))
def test_every_spelling_converts_as_its_meaning_says(spelling):
    # Source: pint's default registry applied to the meaning written by hand; rtol 1e-12.
    meaning, si = MEANINGS[spelling]
    a, b = conversion(spelling, SI_CF[si])
    np.testing.assert_allclose(a * X + b, UREG.Quantity(X, meaning).to(si).magnitude, rtol=1e-12, atol=1e-9)


@pytest.mark.parametrize("spelling", sorted(MEANINGS))
def test_no_spelling_changes_a_value_on_its_own(spelling):
    # Common practice: a spelling of a unit is the same unit, so reading it in its
    # canonical form is the identity (never 180/π or π/180 from a stray angle).
    from evaluation.units import canonical

    assert conversion(spelling, canonical(spelling)) == (1.0, 0.0)


def test_handbook_values_through_the_spellings():
    # SI brochure (BIPM, 9th ed.): 0 °C = 273.15 K; 32 °F = 0 °C = 273.15 K (value from
    # memory); 1 mbar = 1 hPa = 100 Pa (SI prefixes); 1 kg m-2 s-1 of water = 86 400
    # mm/day (common practice, 1000 kg m-3).
    def value(x, source, target):
        a, b = conversion(source, target)
        return a * x + b

    for celsius in ("deg C", "deg. C", "degrees C", "degree_C", "degC", "Celsius"):
        assert value(0.0, celsius, "K") == pytest.approx(273.15, abs=1e-12)
        assert value(273.15, "K", celsius) == pytest.approx(0.0, abs=1e-12)
    for kelvin in ("deg K", "degrees K", "K", "kelvin"):
        assert value(273.15, kelvin, "K") == 273.15
    assert value(32.0, "degF", "K") == pytest.approx(273.15, abs=1e-12)
    for mb in ("mb", "mbar", "millibars", "hPa"):
        assert value(1.0, mb, "Pa") == pytest.approx(100.0, rel=1e-15)
        assert value(1.0, mb, "hPa") == 1.0
    for flux in ("kg/m2/s", "kg m-2 s-1"):
        for depth in ("mm/day", "mm d-1"):
            assert value(1.0, flux, depth) == pytest.approx(86400.0, rel=1e-15)
    for ratio, pct in (("fraction", "percent"), ("1", "%")):
        assert value(0.25, ratio, pct) == pytest.approx(25.0, rel=1e-15)


# Spellings that pint and UDUNITS read as something else than the files mean.  Source:
# pint's default registry and UDUNITS-2 (through cf_units) for what they read.
def test_pint_and_udunits_misread_these_spellings():
    cf_units = pytest.importorskip("cf_units")
    # pint: 'deg C' is degree * coulomb, 'degrees K' is degree * kelvin (×π/180), 'mb' the millibarn
    assert UREG.Unit("deg C").dimensionality == UREG.Unit("coulomb").dimensionality
    assert UREG.Quantity(1.0, "degrees * kelvin").to("kelvin").magnitude == pytest.approx(np.pi / 180.0)
    assert UREG.Unit("mb") == UREG.Unit("millibarn")
    # UDUNITS-2: 'degrees K' is 0.01745 K, 'mb' an area, 'ms-1' a frequency (per millisecond)
    assert cf_units.Unit("degrees K").convert(1.0, "K") == pytest.approx(np.pi / 180.0)
    assert not cf_units.Unit("mb").is_convertible("Pa") and cf_units.Unit("mb").is_convertible("m2")
    assert cf_units.Unit("ms-1").is_convertible("s-1")
    # gridscore reads them as the files mean (checked against pint above)
    assert conversion("degrees K", "K") == (1.0, 0.0)
    assert conversion("mb", "Pa") == pytest.approx((100.0, 0.0))
    assert conversion("ms-1", "m s-1") == (1.0, 0.0)


def test_canonical_forms_mean_the_same_in_udunits():
    # Source: UDUNITS-2 through cf_units: every form the table maps to is read by UDUNITS
    # with the factor and offset pint gives; rtol 1e-12.
    cf_units = pytest.importorskip("cf_units")
    from evaluation.units import SPELLINGS

    for form in sorted(set(SPELLINGS.values())):
        udunits = cf_units.Unit(form)
        si = next(t for t in ("K", "Pa", "m s-1", "kg m-2 s-1", "W m-2", "1", "m", "kg m-2", "m2 s-2", "m3 s-1") if udunits.is_convertible(t))
        a, b = conversion(form, si)
        np.testing.assert_allclose(a * X + b, udunits.convert(X, si), rtol=1e-12, atol=1e-9, err_msg=form)


TRAPS = [
    ("deg", "K"),          # an angle, not a temperature
    ("degrees", "K"),      # an angle, not a temperature
    ("degrees", "1"),      # an angle is not a pure number (pint: ×π/180)
    ("radian", "%"),
    ("C", "K"),            # the coulomb in UDUNITS and pint
    ("F", "K"),            # the farad
    ("PA", "Pa"),          # petaampere: symbols are case-sensitive
    ("mm/month", "mm day-1"),   # a month has no fixed length
    ("kg m-2 yr-1", "kg m-2 s-1"),
    ("mb", "m2"),          # the millibar is a pressure, not an area
    ("ms-1", "s-1"),
    ("mon", "s"),
    ("psu", "g/kg"),       # practical salinity is a conductivity ratio; pint's psu is 1 (×1000)
    ("psu", "1e-3"),
    ("10 degC", "K"),      # a scaled offset unit means nothing
]


@pytest.mark.parametrize(("source", "target"), TRAPS)
def test_traps_are_refused_never_converted(source, target):
    # Source: pint's dimensional analysis treats these pairs as convertible or reads them
    # as other quantities; the files mean different quantities (common practice).
    with pytest.raises(InputError) as err:
        conversion(source, target)
    assert source in err.value.message


def test_a_reference_in_deg_dot_c_and_a_run_in_kelvin_through_the_cli(nc_file, grid_factory, times_factory, score_cli):
    # Source: pint's default registry, 288.15 K = 15 °C (SI brochure); uniform constant
    # fields, so the mean is the field value; rtol 1e-12.  pint alone reads 'deg. C' as
    # degree * coulomb and an earlier reading gave 16 510 (×180/π).
    grid = grid_factory(30.0, 60.0)
    times = times_factory(2001, 2002, "standard")
    shape = (len(times), grid["lat"].size, grid["lon"].size)
    ref = nc_file("ref_c.nc", {"tas": (np.full(shape, 14.0), {"units": "deg. C", "standard_name": "air_temperature"})}, grid=grid, times=times)
    run = nc_file("run_k.nc", {"tas": (np.full(shape, 288.15), {"units": "K", "standard_name": "air_temperature"})}, grid=grid, times=times)
    table = score_cli(["--reference", f"obs={ref}", "--model", f"run-k={run}", "--variable", "tas"])
    v = dict(zip(table["metric"], table["value"], strict=True))
    run_c = UREG.Quantity(288.15, "kelvin").to("degree_Celsius").magnitude
    assert v["mean"] == pytest.approx(run_c, rel=1e-12)
    assert v["ref_mean"] == pytest.approx(14.0, rel=1e-12)
    assert v["bias"] == pytest.approx(run_c - 14.0, rel=1e-9)
    assert set(table.loc[table["metric"] == "mean", "units"]) == {"degC"}


@pytest.mark.parametrize(("attrs", "source", "target", "pint_source", "pint_target"), [
    ({"standard_name": "air_temperature_anomaly"}, "deg. C", "K", "delta_degree_Celsius", "kelvin"),
    ({"long_name": "Surface temperature anomaly"}, "K", "degF", "kelvin", "delta_degree_Fahrenheit"),
    ({"long_name": "temperature anomalies"}, "degF", "degC", "delta_degree_Fahrenheit", "delta_degree_Celsius"),
])  # fmt: skip
def test_an_anomaly_is_converted_as_a_difference(attrs, source, target, pint_source, pint_target):
    # Source: pint's delta units (a temperature difference has no offset); rtol 1e-12.
    da = xr.DataArray(X, dims="x", attrs={"units": source, **attrs}, name="tas_anom")
    expected = UREG.Quantity(X, pint_source).to(pint_target).magnitude
    np.testing.assert_allclose(convert(da, target).values, expected, rtol=1e-12, atol=1e-9)


@pytest.mark.parametrize(("ref_units", "run_units", "needle"), [("deg", "K", "deg"), ("K", "C", "coulomb"), ("K", "degrees", "an angle"), ("hPa", "PA", "PA")])
def test_the_cli_refuses_a_trap_naming_the_unit_and_the_file(nc_file, grid_factory, times_factory, tmp_path, capsys, ref_units, run_units, needle):
    # Source: pint reads each of these pairs as another quantity or as convertible by a
    # factor that is no unit conversion (π/180); common practice says they differ.
    from app.cli import main

    grid = grid_factory(30.0, 60.0)
    times = times_factory(2001, 2002, "standard")
    shape = (len(times), grid["lat"].size, grid["lon"].size)
    ref = nc_file("ref_trap.nc", {"v": (np.full(shape, 1.0), {"units": ref_units})}, grid=grid, times=times)
    run = nc_file("run_trap.nc", {"v": (np.full(shape, 1.0), {"units": run_units})}, grid=grid, times=times)
    code = main(["score", "--reference", f"obs={ref}", "--model", f"m={run}", "--variable", "v", "--output", str(tmp_path / "t.csv")])
    err = capsys.readouterr().err
    assert code == 2 and needle in err and ("ref_trap.nc" in err or "run_trap.nc" in err)
    assert len(err.strip().splitlines()) == 1 and not (tmp_path / "t.csv").exists()


@pytest.mark.parametrize(("source", "target", "pint_source", "pint_target"), [
    ("1e-3", "g/kg", "0.001 * dimensionless", "gram / kilogram"),       # CF unit of sea_water_salinity
    ("1e-3", "1", "0.001 * dimensionless", "dimensionless"),
    ("10^-3", "%", "0.001 * dimensionless", "percent"),
    ("100 Pa", "hPa", "100 * pascal", "hectopascal"),
    ("kg m-2 s-1", "1e-3 kg m-2 s-1", "kilogram / meter ** 2 / second", "0.001 * kilogram / meter ** 2 / second"),
    ("Sv", "m3 s-1", "1e6 * meter ** 3 / second", "meter ** 3 / second"),  # sverdrup (common practice in oceanography)
    ("ppmv", "1", "1e-6 * dimensionless", "dimensionless"),
])  # fmt: skip
def test_numbers_inside_unit_strings_are_kept(source, target, pint_source, pint_target):
    # Source: pint's default registry with the scale written by hand; UDUNITS-2 reads
    # '1e-3' and '10^-3' as 0.001 as well.  pint alone parses '1e-3' only as a quantity,
    # and taking its unit dropped the factor.
    a, b = conversion(source, target)
    expected = (UREG(pint_source) / UREG(pint_target)).to("dimensionless").magnitude
    assert a == pytest.approx(float(expected), rel=1e-12) and b == 0.0
