"""Variables computed from stored ones (net TOA flux, cell-wise albedo).

The registry is shared by the command line and the dashboard: asking
:func:`evaluation.io.get_variable` for ``toa_net`` on a source that stores ``rsdt``,
``rsut`` and ``rlut`` gives the derived field, lazily, with its own attributes.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from typing import TYPE_CHECKING

from .errors import InputError

if TYPE_CHECKING:  # annotations only: the registry is read by the warm cached path without xarray
    import xarray as xr

__all__ = ["DERIVED", "DerivedVariable", "derive"]


@dataclass(frozen=True)
class DerivedVariable:
    """A variable computed from other variables of the same source.

    Attributes
    ----------
    name
        Name the variable is asked for by (CLI ``--variable``, dashboard menus).
    long_name
        Human-readable description written to ``long_name``.
    standard_name
        CF standard name, or ``None`` where the CF table has no exact match.
    units
        Units of the result.
    inputs
        Names of the stored variables it needs (looked up by name or CF standard_name).
    compute
        Function of the input DataArrays, in the order of ``inputs``.
    """

    name: str
    long_name: str
    standard_name: str | None
    units: str
    inputs: tuple[str, ...]
    compute: Callable[..., xr.DataArray]


_FLUX_UNITS = "W m-2"

# The CF standard name by which each input may also be stored, and the units it is
# brought to before it is combined with the others.
_INPUTS: dict[str, tuple[str, str]] = {
    "rsdt": ("toa_incoming_shortwave_flux", _FLUX_UNITS),
    "rsut": ("toa_outgoing_shortwave_flux", _FLUX_UNITS),
    "rlut": ("toa_outgoing_longwave_flux", _FLUX_UNITS),
}


def _net_toa(rsdt: xr.DataArray, rsut: xr.DataArray, rlut: xr.DataArray) -> xr.DataArray:
    return rsdt - rsut - rlut


def _albedo(rsut: xr.DataArray, rsdt: xr.DataArray) -> xr.DataArray:
    # Polar night has no incoming sunlight: the ratio is undefined there, not zero.
    return rsut / rsdt.where(rsdt > 0)


DERIVED: dict[str, DerivedVariable] = {
    v.name: v
    for v in (
        DerivedVariable(
            name="toa_net",
            long_name="net downward radiative flux at the top of the atmosphere (rsdt - rsut - rlut)",
            # The CF table's name for this exact quantity could not be confirmed; none is
            # better than a wrong one.
            standard_name=None,
            units=_FLUX_UNITS,
            inputs=("rsdt", "rsut", "rlut"),
            compute=_net_toa,
        ),
        DerivedVariable(
            name="albedo",
            long_name="top-of-atmosphere albedo of each cell (rsut / rsdt)",
            # Cell-wise ratio.  The planetary albedo is the ratio of the global means,
            # computed in evaluation.budget, not the mean of this field.
            standard_name=None,
            units="1",
            inputs=("rsut", "rsdt"),
            compute=_albedo,
        ),
    )
}


def _find(ds: xr.Dataset, name: str) -> xr.DataArray | None:
    """A stored input by name, else by its CF standard_name; ``None`` when absent."""
    if name in ds.data_vars:
        return ds[name]
    wanted = {name, _INPUTS[name][0] if name in _INPUTS else name}
    for var in ds.data_vars.values():
        if var.attrs.get("standard_name") in wanted:
            return var
    return None


def _in_input_units(name: str, da: xr.DataArray, *, source: str | None) -> xr.DataArray:
    # Imported here so that evaluation.io, which imports this module lazily, never pulls
    # pint in just to open a file.
    from .units import convert

    return convert(da, _INPUTS[name][1], source=source) if name in _INPUTS else da


def derive(ds: xr.Dataset, name: str, *, source: str | None = None) -> xr.DataArray | None:
    """Compute a derived variable from the stored variables of ``ds``.

    Parameters
    ----------
    ds
        A normalised dataset (see :func:`evaluation.io.open_source`).
    name
        Name of the derived variable (a key of :data:`DERIVED`).
    source
        Name of the source, for messages.

    Returns
    -------
    xarray.DataArray or None
        The derived field (lazy for dask input) named ``name`` with ``units``,
        ``long_name`` and, where CF has one, ``standard_name``; ``None`` when ``name`` is
        not a derived variable.

    Raises
    ------
    InputError
        When ``name`` is derived but some of its inputs are absent (all missing ones are
        named), or when an input's units cannot be converted to W m-2.

    Notes
    -----
    NaN in any input gives NaN in the result for that cell and time.  The albedo is NaN
    where the incoming flux is zero or negative (polar night).  Inputs are brought to
    W m-2 before combining, so inputs stored in other flux units mix correctly; an input
    without a ``units`` attribute is an :class:`InputError`.
    """
    spec = DERIVED.get(name)
    if spec is None:
        return None
    found = {n: _find(ds, n) for n in spec.inputs}
    missing = [n for n, da in found.items() if da is None]
    if missing:
        listed = ", ".join(f"{_INPUTS[n][0]} ({n})" if n in _INPUTS else n for n in missing)
        held = ", ".join(sorted(map(str, ds.data_vars))) or "none"
        where = source or ds.attrs.get("gridscore_files", "").split("\n")[0] or None
        raise InputError(
            f"'{name}' is computed from {', '.join(spec.inputs)} but there is no {listed}; variables found: {held}",
            file=where,
            remedy="add the missing variables to the source's files",
        )
    args = [_in_input_units(n, da, source=source) for n, da in found.items() if da is not None]
    out = spec.compute(*args)
    out.name = name
    attrs = {"units": spec.units, "long_name": spec.long_name}
    if spec.standard_name:
        attrs["standard_name"] = spec.standard_name
    out.attrs = attrs
    return out
