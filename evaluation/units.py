"""Unit conversion with pint, reading CF unit strings through cf-xarray's registry.

Every conversion the tool needs is affine (``y = a x + b``: K ↔ °C, Pa ↔ hPa,
kg m-2 s-1 ↔ mm/day), so the factors are taken from pint once and applied lazily to
dask arrays.  A precipitation mass flux becomes a depth rate through the density of
liquid water, 1000 kg m-3 (common practice).
"""

from __future__ import annotations

from functools import lru_cache

import xarray as xr

from .errors import InputError

__all__ = ["WATER_DENSITY", "registry", "parse_units", "conversion", "convert", "trend_units", "cf_units"]

WATER_DENSITY = 1000.0  # kg m-3, liquid water (common practice for precipitation depth)


@lru_cache(maxsize=1)
def registry():
    """cf-xarray's pint registry, which reads CF strings such as ``kg m-2 s-1``."""
    import cf_xarray.units  # noqa: F401  (side effect: defines the registry)

    return cf_xarray.units.units


@lru_cache(maxsize=256)
def parse_units(text: str):
    """A pint Unit for a CF unit string, or :class:`InputError`."""
    ureg = registry()
    cleaned = str(text).strip()
    if cleaned in ("", "1", "-", "none", "fraction"):
        return ureg.dimensionless
    if cleaned in ("%", "percent"):
        return ureg.percent
    try:
        return ureg.Unit(cleaned)
    except Exception:
        try:
            return ureg.Quantity(cleaned).units
        except Exception:
            raise InputError(f"cannot read the units '{text}'", remedy="use a CF/UDUNITS unit string such as 'K', 'kg m-2 s-1' or 'W m-2'") from None


@lru_cache(maxsize=256)
def conversion(source: str, target: str) -> tuple[float, float]:
    """Factors ``(a, b)`` with ``target_value = a * source_value + b``.

    Raises :class:`InputError` when the units describe different quantities.
    """
    ureg = registry()
    src, tgt = parse_units(source), parse_units(target)
    mass_flux = ureg.Unit("kg m-2 s-1").dimensionality
    depth_rate = ureg.Unit("m s-1").dimensionality
    density = 1.0
    if src.dimensionality == mass_flux and tgt.dimensionality == depth_rate:
        density = 1.0 / WATER_DENSITY  # (kg m-2 s-1) / (kg m-3) = m s-1
        src = src / ureg.Unit("kg m-3")
    elif src.dimensionality == depth_rate and tgt.dimensionality == mass_flux:
        density = WATER_DENSITY
        src = src * ureg.Unit("kg m-3")
    try:
        zero = ureg.Quantity(0.0, src).to(tgt).magnitude
        one = ureg.Quantity(1.0, src).to(tgt).magnitude
    except Exception:
        raise InputError(
            f"units '{source}' cannot be converted to '{target}'",
            remedy="check that both sources hold the same quantity (e.g. a temperature in K or degC)",
        ) from None
    a = (one - zero) * density
    b = zero
    return float(a), float(b)


def convert(da: xr.DataArray, target: str, *, source: str | None = None) -> xr.DataArray:
    """``da`` in ``target`` units (lazy); attributes kept, ``units`` replaced.

    Notes
    -----
    NaN stays NaN.  A missing ``units`` attribute is an :class:`InputError`, because a
    silent assumption is how a precipitation field ends up 86 400 times too small.
    """
    units = da.attrs.get("units")
    if units is None:
        raise InputError(f"variable '{da.name}' has no units attribute", file=source, remedy="add a CF units attribute")
    if str(units).strip() == str(target).strip():
        return da
    try:
        a, b = conversion(str(units), str(target))
    except InputError as err:
        raise InputError(err.problem, file=source, remedy=err.remedy) from None
    out = da * a + b if b != 0.0 else da * a
    out.attrs = {**da.attrs, "units": target}
    out.name = da.name
    return out


def cf_units(text: str) -> str:
    """A CF-style unit string for display and files (``K``, ``W m-2``, ``kg m-2 s-1``)."""
    return str(text).strip()


def trend_units(units: str) -> str:
    """Units of a trend per decade: ``K`` -> ``K/decade``.

    A trend of a temperature in °C is a temperature difference, which is the kelvin.
    """
    u = str(units).strip()
    if u.lower() in ("degc", "deg_c", "celsius", "degree_celsius", "degrees_celsius", "°c"):
        u = "K"
    return f"{u}/decade"
