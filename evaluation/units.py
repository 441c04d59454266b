"""Unit conversion with pint, reading CF unit strings through cf-xarray's registry.

Every conversion the tool needs is affine (``y = a x + b``: K ↔ °C, Pa ↔ hPa,
kg m-2 s-1 ↔ mm/day), so the factors are taken from pint once and applied lazily to
dask arrays.  A precipitation mass flux becomes a depth rate through the density of
liquid water, 1000 kg m-3 (common practice).

A value only ever changes when both units describe the same quantity.  Three things
keep a unit string from being read as something it does not mean:

* :data:`SPELLINGS`, the spellings real files carry, each mapped to the CF/UDUNITS
  string it means (``deg. C`` is degrees Celsius; left to a parser it is an angle times
  a Celsius degree, 57.3 times too large, in pint and in UDUNITS alike);
* :data:`AMBIGUOUS`, spellings refused outright because the registries disagree on
  them (``C`` is the coulomb in UDUNITS and pint, degrees Celsius in cf-xarray);
* angles (degree, radian) and practical salinity count as dimensions of their own,
  although pint and UDUNITS take them as dimensionless, so that a field in ``degrees``
  is never turned into a fraction by a factor of π/180; and a month or a year, which
  have no fixed length, are never converted into days or seconds.

A number inside a unit string is kept (``1e-3``, CF's unit of salinity, is 0.001).
Anomalies (:func:`is_difference`) convert without the Celsius offset.
"""

from __future__ import annotations

import re
from functools import lru_cache

import xarray as xr

from .errors import InputError

__all__ = [
    "WATER_DENSITY",
    "SPELLINGS",
    "AMBIGUOUS",
    "registry",
    "canonical",
    "parse_units",
    "parse_scaled",
    "quantity_kind",
    "conversion",
    "convert",
    "trend_units",
    "cf_units",
    "STANDARD_NAME_UNITS",
    "check_standard_units",
    "is_difference",
]

WATER_DENSITY = 1000.0  # kg m-3, liquid water (common practice for precipitation depth)


def _spellings(canonical_form: str, *written: str) -> dict[str, str]:
    return {w: canonical_form for w in (canonical_form, *written)}


#: Unit spellings found in real files -> the CF/UDUNITS string they mean.  Keys are
#: matched after white space is collapsed; case matters (``Pa`` is not ``PA``).  Where
#: UDUNITS or pint read a spelling differently, the comment says so and why the table
#: wins.
SPELLINGS: dict[str, str] = {
    # Celsius.  'deg C', 'deg. C', 'degrees C', 'degrees Celsius': pint/UDUNITS read an
    # angle times a Celsius degree (or a coulomb); the files mean degrees Celsius.
    **_spellings(
        "degC", "deg C", "deg. C", "deg.C", "degrees C", "degree C", "degree_C", "degrees_C", "deg_C",
        "degree_Celsius", "degrees_Celsius", "degree Celsius", "degrees Celsius", "Celsius", "celsius",
        "°C", "℃", "º C", "ºC", "° C", "DegC", "degc",
    ),
    # Kelvin.  'deg K', 'degrees K': an angle times a kelvin in pint and UDUNITS (×0.01745).
    **_spellings(
        "K", "kelvin", "Kelvin", "kelvins", "deg K", "deg. K", "degrees K", "degree K", "degK", "deg_K",
        "degrees_K", "degree_K", "degreesK", "°K",
    ),
    # Fahrenheit ('F' alone is the farad: see AMBIGUOUS).
    **_spellings("degF", "deg F", "deg. F", "degrees F", "degree F", "degree_F", "degrees_F", "Fahrenheit", "°F", "℉"),
    # Pressure.  'mb' is the millibarn (an area) in pint and UDUNITS; in meteorological
    # files it is always the millibar.
    **_spellings("hPa", "mb", "mbar", "millibar", "millibars", "hectopascal", "hectopascals"),
    **_spellings("Pa", "pascal", "pascals", "N m-2", "N/m2", "N/m^2", "N m**-2"),
    # Precipitation and other water fluxes.
    **_spellings("mm day-1", "mm/day", "mm d-1", "mm/d", "mm day^-1", "mm day**-1", "mm per day", "mm.day-1"),
    **_spellings("mm h-1", "mm/h", "mm/hr", "mm hr-1", "mm h**-1"),
    **_spellings("mm s-1", "mm/s", "mm s**-1", "mm sec-1"),
    **_spellings(
        "kg m-2 s-1", "kg/m2/s", "kg/m^2/s", "kg m^-2 s^-1", "kg m**-2 s**-1", "kg/(m2 s)", "kg/(m^2 s)",
        "kg m-2s-1", "kgm-2s-1", "kg.m-2.s-1", "kg/m2s",
    ),
    **_spellings("kg m-2", "kg/m2", "kg/m^2", "kg m**-2", "kg m^-2"),
    # Radiative and heat fluxes.
    **_spellings("W m-2", "W/m^2", "W/m2", "W m**-2", "W m^-2", "W/m**2", "W.m-2", "Wm-2", "watt/m2", "Watts/m2", "watts/m2", "W/sq m"),
    # Dimensionless.
    **_spellings("1", "", "-", "fraction", "none", "dimensionless", "unitless", "0-1", "frac"),
    **_spellings("%", "percent", "percentage", "per cent"),
    # Wind.  'ms-1' is a per-millisecond frequency in pint and UDUNITS; in climate files
    # it means metres per second.
    **_spellings("m s-1", "m/s", "ms-1", "m s**-1", "m s^-1", "m/sec", "m.s-1", "m sec-1", "meters/second", "metres/second"),
    # Humidity and other mass ratios.
    **_spellings("g kg-1", "g/kg", "g kg**-1", "g kg^-1"),
    **_spellings("kg kg-1", "kg/kg", "kg kg**-1", "kg kg^-1"),
    # Geopotential height ('gpm', geopotential metre: numerically a metre in CF practice).
    **_spellings("m", "gpm", "metre", "meter", "metres", "meters"),
    **_spellings("dam", "gpdm", "decametre", "decameter"),
    **_spellings("m2 s-2", "m2/s2", "m^2/s^2", "m**2 s**-2", "m^2 s^-2"),
    # Ocean volume transport: 'Sv' is the sievert in pint and UDUNITS; in ocean files the
    # sverdrup, 10^6 m3 s-1.
    **_spellings("1e6 m3 s-1", "Sv", "sverdrup", "Sverdrup"),
    # Mole fractions by volume
    **_spellings("ppm", "ppmv"),
}

#: Spellings refused whatever they are compared with: the registries disagree.
AMBIGUOUS: dict[str, str] = {
    "C": "'C' is the coulomb in UDUNITS and pint (cf-xarray reads degrees Celsius) — write 'degC' for degrees Celsius",
    "F": "'F' is the farad in UDUNITS and pint — write 'degF' for degrees Fahrenheit",
    "deg": "'deg' alone is an angle — write 'degC' or 'K' for a temperature, 'degrees' for an angle",
    "mon": "'mon' is no unit UDUNITS or pint knows — write the unit of the quantity itself",
}

# Root units of pint counted as dimensions of their own, although pint takes them as
# dimensionless: an angle never becomes a pure number (×π/180), and practical salinity
# (a conductivity ratio on the PSS-78 scale) never becomes a mass fraction (pint's psu
# is 1, so 35 psu would be 35 000 g/kg).
_OWN_ROOTS = ("radian", "practical_salinity_unit")
# Time units without a fixed length in a calendar: a conversion through them would
# assume some mean month or year (pint: 1/12 of 365.25 days; UDUNITS: 1/12 of a
# tropical year) and be silently wrong for any given month.
_CALENDAR_TIME = {"month", "year", "common_year", "leap_year", "julian_year", "gregorian_year", "decade", "century"}
_SPACE = re.compile(r"\s+")


# 'mb' inside a compound unit ('mb/day', 'mb s-1') is the millibar too, not the millibarn
_MB_TOKEN = re.compile(r"(?<![A-Za-z_])mb(?![A-Za-z_])")


def _key(text: str) -> str:
    return _SPACE.sub(" ", str(text)).strip()


@lru_cache(maxsize=1)
def registry():
    """cf-xarray's pint registry, which reads CF strings such as ``kg m-2 s-1``."""
    import cf_xarray.units  # noqa: F401  (side effect: defines the registry)

    return cf_xarray.units.units


def canonical(text: str) -> str:
    """The CF/UDUNITS string a unit spelling means: ``deg. C`` -> ``degC``, ``mb`` -> ``hPa``.

    Spellings outside :data:`SPELLINGS` are returned with white space collapsed.
    """
    key = _key(text)
    return SPELLINGS.get(key, _MB_TOKEN.sub("hPa", key))


def parse_units(text: str):
    """A pint Unit for a CF unit string, or :class:`InputError`.

    A numeric scale in the string (``1e-3``, ``100 Pa``) is not part of the Unit; see
    :func:`parse_scaled`, which :func:`conversion` uses.

    Notes
    -----
    Refused: spellings in :data:`AMBIGUOUS`, strings no registry reads, and products of
    an angle with a temperature (``degrees Kelvin``-like spellings outside the table).
    """
    return parse_scaled(text)[1]


@lru_cache(maxsize=256)
def parse_scaled(text: str) -> tuple[float, object]:
    """``(scale, unit)`` for a CF unit string: ``1e-3`` is ``(0.001, dimensionless)``.

    UDUNITS allows a number in a unit string (CF's unit of sea_water_salinity is
    ``1e-3``); pint parses such a string only as a quantity, whose magnitude must be kept.
    """
    ureg = registry()
    key = _key(text)
    if key in AMBIGUOUS:
        raise InputError(f"ambiguous units '{text}'", remedy=AMBIGUOUS[key])
    cleaned = canonical(key)
    if cleaned == "1":
        return 1.0, ureg.dimensionless
    if cleaned == "%":
        return 1.0, ureg.percent
    try:
        scale, unit = 1.0, ureg.Unit(cleaned)
    except Exception:
        try:
            q = ureg.Quantity(cleaned)
            scale, unit = float(q.magnitude), q.units
        except Exception:
            raise InputError(f"cannot read the units '{text}'", remedy="use a CF/UDUNITS unit string such as 'K', 'kg m-2 s-1' or 'W m-2'") from None
    try:
        own = any(_own_dimensions(unit))
    except Exception:  # pint builds some units it cannot reduce ("K/decade"): as unreadable
        raise InputError(f"cannot read the units '{text}'", remedy="use a CF/UDUNITS unit string such as 'K', 'kg m-2 s-1' or 'W m-2'") from None
    if own and unit.dimensionality.get("[temperature]", 0):
        raise InputError(
            f"the units '{text}' read as an angle times a temperature",
            remedy="write 'degC' for degrees Celsius or 'K' for kelvin",
        )
    if scale != 1.0 and ureg.Quantity(0.0, unit).to_root_units().magnitude != 0.0:
        raise InputError(f"the units '{text}' scale a temperature with an offset", remedy="write 'K', 'degC' or 'degF' without a number")
    return scale, unit


def _own_dimensions(unit) -> tuple[float, ...]:
    """Exponents of the root units counted as dimensions of their own (angle, practical
    salinity); all zero for ordinary units."""
    roots = registry().get_root_units(unit)[1]._units
    return tuple(float(roots.get(name, 0)) for name in _OWN_ROOTS)


def _calendar_power(unit) -> float:
    return float(sum(p for name, p in unit._units.items() if name in _CALENDAR_TIME))


# Readable names of the dimensions met in climate files, for messages.
_KINDS = {
    "[temperature]": "a temperature",
    "[mass] / [length] / [time] ** 2": "a pressure",
    "[length] / [time]": "a speed or depth rate",
    "[mass] / [length] ** 2 / [time]": "a mass flux",
    "[mass] / [time] ** 3": "an energy flux",
    "[mass] / [length] ** 2": "a mass per area",
    "[length]": "a length",
    "[length] ** 2": "an area",
    "[time]": "a time",
    "[current] * [time]": "an electric charge",
    "[current]": "an electric current",
}


def quantity_kind(text: str) -> str:
    """What a unit string measures, in words (``'a temperature'``, ``'an angle'``).

    Raises :class:`InputError` for units :func:`parse_units` refuses.
    """
    unit = parse_units(text)
    angle, salinity = _own_dimensions(unit)
    if salinity:
        return "a practical salinity"
    if angle:
        return "an angle" if not unit.dimensionality else f"an angle times {unit.dimensionality}"
    if not unit.dimensionality:
        return "a pure number"
    return _KINDS.get(str(unit.dimensionality), str(unit.dimensionality))


@lru_cache(maxsize=256)
def conversion(source: str, target: str, *, difference: bool = False) -> tuple[float, float]:
    """Factors ``(a, b)`` with ``target_value = a * source_value + b``.

    With ``difference=True`` the values are differences (anomalies, biases): the
    offset of Celsius or Fahrenheit does not apply, ``b`` is 0.

    Raises :class:`InputError` when the units describe different quantities (angles
    count as a dimension of their own), when a month or year would have to be given a
    length, or when either unit is refused by :func:`parse_units`.
    """
    if source == target and source in _PLAIN_UNITS:
        # the identity, without loading pint's registry (about 0.7 s of every cold command)
        return 1.0, 0.0
    ureg = registry()
    (src_scale, src), (tgt_scale, tgt) = parse_scaled(source), parse_scaled(target)
    mass_flux = ureg.Unit("kg m-2 s-1").dimensionality
    depth_rate = ureg.Unit("m s-1").dimensionality
    density = 1.0
    if src.dimensionality == mass_flux and tgt.dimensionality == depth_rate:
        density = 1.0 / WATER_DENSITY  # (kg m-2 s-1) / (kg m-3) = m s-1
        src = src / ureg.Unit("kg m-3")
    elif src.dimensionality == depth_rate and tgt.dimensionality == mass_flux:
        density = WATER_DENSITY
        src = src * ureg.Unit("kg m-3")
    refused = InputError(
        f"units '{source}' ({quantity_kind(source)}) cannot be converted to '{target}' ({quantity_kind(target)})",
        remedy="check that both sources hold the same quantity (e.g. a temperature in K or degC)",
    )
    if src.dimensionality != tgt.dimensionality or _own_dimensions(src) != _own_dimensions(tgt):
        raise refused
    if _calendar_power(src) != _calendar_power(tgt):
        raise InputError(
            f"units '{source}' cannot be converted to '{target}': a month or a year has no fixed length",
            remedy="convert with the month lengths of the file's calendar first, or give both in the same units",
        )
    try:
        zero = ureg.Quantity(0.0, src).to(tgt).magnitude / tgt_scale
        one = ureg.Quantity(src_scale, src).to(tgt).magnitude / tgt_scale
    except Exception:
        raise refused from None
    a = (one - zero) * density
    b = 0.0 if difference else zero
    return float(a), float(b)


def is_difference(attrs: dict) -> bool:
    """Whether a variable holds differences from something (an anomaly), by its CF
    standard name (``..._anomaly``) or its long name, so that no temperature offset applies."""
    standard_name = str(attrs.get("standard_name", "")).strip().lower()
    long_name = str(attrs.get("long_name", "")).lower()
    return standard_name.endswith("_anomaly") or "anomal" in long_name


#: Canonical units of common CF standard names (CF standard name table; value from
#: memory).  A variable's units must convert to these, so that a temperature stored in
#: 'deg' (an angle) is refused even when the reference carries the same mistake.
STANDARD_NAME_UNITS: dict[str, str] = {
    **dict.fromkeys(("air_temperature", "surface_temperature", "sea_surface_temperature", "sea_water_potential_temperature",
                     "air_potential_temperature", "dew_point_temperature"), "K"),
    **dict.fromkeys(("air_pressure", "air_pressure_at_mean_sea_level", "surface_air_pressure"), "Pa"),
    **dict.fromkeys(("precipitation_flux", "convective_precipitation_flux", "snowfall_flux", "water_evapotranspiration_flux"), "kg m-2 s-1"),
    **dict.fromkeys(("toa_incoming_shortwave_flux", "toa_outgoing_shortwave_flux", "toa_outgoing_longwave_flux",
                     "surface_downwelling_shortwave_flux_in_air", "surface_downwelling_longwave_flux_in_air",
                     "surface_upward_sensible_heat_flux", "surface_upward_latent_heat_flux", "toa_net_downward_radiative_flux"), "W m-2"),
    **dict.fromkeys(("eastward_wind", "northward_wind", "wind_speed", "upward_air_velocity"), "m s-1"),
    **dict.fromkeys(("specific_humidity", "relative_humidity", "land_area_fraction", "sea_area_fraction", "sea_ice_area_fraction",
                     "cloud_area_fraction", "surface_albedo"), "1"),
    **dict.fromkeys(("geopotential_height", "surface_altitude", "sea_surface_height_above_geoid"), "m"),
    "cell_area": "m2",
    "geopotential": "m2 s-2",
}
#: Unit strings that pint reads as exactly themselves (the canonical units above): converting
#: one to itself is the identity, known without the registry.
_PLAIN_UNITS = frozenset(STANDARD_NAME_UNITS.values())


def check_standard_units(standard_name: str | None, units: str) -> None:
    """:class:`InputError` when ``units`` cannot describe the quantity the CF standard name names.

    Standard names outside :data:`STANDARD_NAME_UNITS` are not checked.
    """
    expected = STANDARD_NAME_UNITS.get(str(standard_name or "").strip())
    if expected is None:
        return
    try:
        conversion(str(units), expected)
    except InputError as err:
        raise InputError(
            f"the units '{units}' are {quantity_kind(units)}, but standard_name '{standard_name}' is measured in {expected}",
            remedy="correct the units attribute (e.g. 'degC' or 'K' for a temperature)",
        ) from err


def convert(da: xr.DataArray, target: str, *, source: str | None = None) -> xr.DataArray:
    """``da`` in ``target`` units (lazy); attributes kept, ``units`` replaced.

    Notes
    -----
    NaN stays NaN.  A missing ``units`` attribute is an :class:`InputError`, because a
    silent assumption is how a precipitation field ends up 86 400 times too small.  An
    anomaly (:func:`is_difference`) is converted without the Celsius/Fahrenheit offset.
    """
    units = da.attrs.get("units")
    if units is None:
        raise InputError(f"variable '{da.name}' has no units attribute", file=source, remedy="add a CF units attribute")
    try:
        # also for equal strings: an ambiguous or unreadable unit is refused, not passed on
        check_standard_units(da.attrs.get("standard_name"), str(units))
        a, b = conversion(str(units), str(target), difference=is_difference(da.attrs))
    except InputError as err:
        raise InputError(err.problem, file=source, remedy=err.remedy) from None
    if a == 1.0 and b == 0.0:
        out = da.copy(deep=False)
    else:
        out = da * a + b if b != 0.0 else da * a
    out.attrs = {**da.attrs, "units": target}
    out.name = da.name
    return out


def cf_units(text: str) -> str:
    """A CF-style unit string for display and files (``K``, ``W m-2``, ``kg m-2 s-1``).

    Known spellings become their :data:`SPELLINGS` form (``deg. C`` -> ``degC``).
    """
    return canonical(text)


def trend_units(units: str) -> str:
    """Units of a trend per decade: ``K`` -> ``K/decade``.

    A trend of a temperature in °C is a temperature difference, which is the kelvin.
    """
    u = canonical(units)
    if u.lower() in ("degc", "deg_c", "celsius", "degree_celsius", "degrees_celsius", "°c"):
        u = "K"
    return f"{u}/decade"
