"""Tests of evaluation.units: CF unit strings, affine conversions, lazy application."""

from __future__ import annotations

import dask.array as dsa
import numpy as np
import pytest
import xarray as xr

from evaluation.errors import InputError
from evaluation.units import WATER_DENSITY, conversion, convert, parse_units, trend_units


def _field(values, units):
    return xr.DataArray(np.asarray(values, dtype="float64"), dims="x", attrs={"units": units, "long_name": "thing"}, name="v")


@pytest.mark.parametrize(
    ("source", "target", "x", "expected"),
    [
        # SI brochure (BIPM, 9th ed.): t/°C = T/K − 273.15
        ("K", "degC", 273.15, 0.0),
        ("degC", "K", 0.0, 273.15),
        ("degC", "K", -40.0, 233.15),
        ("K", "degC", 300.0, 26.85),
        # 1 hPa = 100 Pa (SI prefix hecto)
        ("Pa", "hPa", 101325.0, 1013.25),
        ("hPa", "Pa", 1.0, 100.0),
        # 1 kg m-2 of liquid water (1000 kg m-3) is a 1 mm layer; a day has 86 400 s (common practice)
        ("kg m-2 s-1", "mm day-1", 1.0, 86400.0),
        ("kg m-2 s-1", "mm/day", 2.0 / 86400.0, 2.0),
        ("mm day-1", "kg m-2 s-1", 86.4, 1e-3),
        ("mm d-1", "kg m-2 s-1", 86.4, 1e-3),
        # W m-2 is the same unit however it is written (UDUNITS grammar)
        ("W m-2", "W/m^2", 240.0, 240.0),
        ("W m-2", "mW m-2", 1.0, 1000.0),
    ],
)
def test_conversion_matches_handbook_factors(source, target, x, expected):
    a, b = conversion(source, target)
    assert a * x + b == pytest.approx(expected, rel=1e-12, abs=1e-9)


def test_water_density_is_the_common_practice_value():
    # density of liquid water used for precipitation depth: 1000 kg m-3 (common practice)
    assert WATER_DENSITY == 1000.0


@pytest.mark.parametrize(("source", "target"), [("K", "W m-2"), ("kg m-2 s-1", "K"), ("Pa", "m s-1"), ("W m-2", "mm day-1")])
def test_incompatible_units_raise_input_error(source, target):
    with pytest.raises(InputError, match="cannot be converted"):
        conversion(source, target)


@pytest.mark.parametrize("text", ["banana", "degrees_wombat", "m s-1 per wombat"])
def test_unreadable_units_raise_input_error(text):
    with pytest.raises(InputError, match="cannot read the units"):
        parse_units(text)


def test_convert_is_lazy_and_keeps_attributes():
    da = xr.DataArray(dsa.from_array(np.array([0.0, 10.0, np.nan]), chunks=1), dims="x", attrs={"units": "degC", "long_name": "t"}, name="tas")
    out = convert(da, "K")
    assert isinstance(out.data, dsa.Array)  # still a dask array: nothing computed
    assert out.attrs["units"] == "K" and out.attrs["long_name"] == "t" and out.name == "tas"
    values = out.values
    # SI: T/K = t/°C + 273.15; NaN stays NaN
    np.testing.assert_allclose(values[:2], [273.15, 283.15], rtol=0, atol=1e-12)
    assert np.isnan(values[2])


def test_convert_precipitation_to_mm_per_day():
    da = _field([1e-5, 3e-5], "kg m-2 s-1")
    # 1 kg m-2 s-1 = 86 400 mm day-1 with 1000 kg m-3 (common practice)
    np.testing.assert_allclose(convert(da, "mm day-1").values, [0.864, 2.592], rtol=1e-12)


def test_convert_without_units_is_an_input_error():
    da = xr.DataArray([1.0, 2.0], dims="x", name="tas")
    with pytest.raises(InputError, match="no units attribute") as err:
        convert(da, "K", source="run-a")
    assert err.value.file == "run-a"


def test_convert_incompatible_names_the_source():
    with pytest.raises(InputError) as err:
        convert(_field([1.0], "W m-2"), "K", source="run-b")
    assert err.value.file == "run-b"
    assert "\n" not in err.value.message


@pytest.mark.parametrize(("units", "expected"), [("K", "K/decade"), ("degC", "K/decade"), ("mm day-1", "mm day-1/decade"), ("W m-2", "W m-2/decade")])
def test_trend_units(units, expected):
    # a trend of a Celsius temperature is a temperature difference, expressed in kelvin (SI brochure)
    assert trend_units(units) == expected


# ---------------------------------------------------------------------------- spellings


@pytest.mark.parametrize(("text", "form"), [("deg. C", "degC"), ("deg  C", "degC"), ("mb", "hPa"), ("kg/m2/s", "kg m-2 s-1"), ("W/m2", "W m-2"), ("ms-1", "m s-1"), ("banana", "banana")])
def test_canonical_forms(text, form):
    from evaluation.units import canonical, cf_units

    assert canonical(text) == form == cf_units(text)


@pytest.mark.parametrize(("text", "needle"), [("C", "coulomb"), ("F", "farad"), ("deg", "angle"), (" C ", "coulomb")])
def test_ambiguous_spellings_are_refused_with_the_reason(text, needle):
    with pytest.raises(InputError) as err:
        parse_units(text)
    assert needle in err.value.message and "ambiguous" in err.value.message


def test_an_angle_times_a_temperature_is_refused():
    # outside the table, e.g. 'degree kelvin': pint reads degree * kelvin (×π/180)
    with pytest.raises(InputError, match="angle times a temperature"):
        parse_units("degree kelvin")


def test_convert_refuses_an_ambiguous_unit_even_when_both_sides_say_it():
    with pytest.raises(InputError, match="ambiguous") as err:
        convert(_field([1.0], "C"), "C", source="run-c")
    assert err.value.file == "run-c"


def test_convert_of_equal_units_keeps_values_and_sets_the_canonical_label():
    out = convert(_field([1.5, np.nan], "deg. C"), "degC")
    np.testing.assert_array_equal(out.values, [1.5, np.nan])
    assert out.attrs["units"] == "degC" and out.name == "v"


def test_refusal_names_both_quantities():
    with pytest.raises(InputError) as err:
        conversion("degrees", "K")
    assert "an angle" in err.value.message and "a temperature" in err.value.message


def test_trend_units_of_a_celsius_spelling():
    # a trend of a Celsius temperature is a temperature difference: kelvin (SI brochure)
    assert trend_units("deg. C") == "K/decade"


def test_mb_inside_a_compound_unit_is_the_millibar():
    # 1 mbar = 100 Pa (SI prefixes; the millibar is 1 hPa); pint and UDUNITS read 'mb/day' as millibarn per day
    a, b = conversion("mb/day", "Pa s-1")
    assert a == pytest.approx(100.0 / 86400.0, rel=1e-15) and b == 0.0


@pytest.mark.parametrize(("standard_name", "units", "ok"), [
    ("air_temperature", "deg. C", True), ("air_temperature", "K", True), ("air_temperature", "degrees", False),
    ("precipitation_flux", "mm/day", True), ("precipitation_flux", "W m-2", False), ("land_area_fraction", "%", True),
    ("air_pressure_at_mean_sea_level", "mb", True), ("air_pressure_at_mean_sea_level", "PA", False), ("some_unknown_name", "banana/s", True),
])  # fmt: skip
def test_units_must_fit_the_standard_name(standard_name, units, ok):
    # canonical units of the CF standard name table (value from memory)
    from evaluation.units import check_standard_units

    if ok:
        check_standard_units(standard_name, units)
    else:
        with pytest.raises(InputError, match=standard_name):
            check_standard_units(standard_name, units)


def test_convert_refuses_a_temperature_in_an_angle_unit_even_against_itself():
    da = _field([1.0], "degrees")
    da.attrs["standard_name"] = "air_temperature"
    with pytest.raises(InputError, match="an angle"):
        convert(da, "degrees", source="run-d")


def test_units_that_pint_builds_but_cannot_reduce_are_refused_as_input() -> None:
    # "decade" is no UDUNITS unit (UDUNITS-2 units database); pint accepts the string
    # "K/decade" as a Unit and fails only when reducing it, which must not escape as a crash.
    with pytest.raises(InputError, match="cannot read the units 'K/decade'"):
        parse_units("K/decade")
