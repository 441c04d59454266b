"""Vertical levels: finding vertical axes by CF attributes, choosing and interpolating a level.

A vertical coordinate is recognised as the CF conventions describe it (cf-conventions 1.10,
section 4.3): by ``standard_name``, by ``axis = "Z"``, by a ``positive`` attribute, or by
units of pressure.  Names are never used.  What kind of axis it is (pressure, height,
depth, or a model level that gridscore cannot interpolate) is read from the tables below,
not from a chain of conditions.

After :func:`evaluation.io.normalise` a variable with several levels of one vertical axis
has the dimension ``level`` whose coordinate carries ``units``, ``positive`` and
``level_kind``.  :func:`select_level` turns it into a single level: the level itself when
the file has it, else linear interpolation in log-pressure (pressure) or in height or
depth (the others) between the two neighbouring levels.  The interpolation is a weighted
sum of two levels with fixed weights, so it is linear in the data: it commutes with the
time means that follow, and only the two levels it needs are read from disk.  A level
outside the levels of a source is refused (no extrapolation); a level below the surface
(a missing value in the file) stays missing.
"""

from __future__ import annotations

import re
from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np
import xarray as xr

from .errors import InputError
from .units import conversion, parse_units

__all__ = [
    "KINDS",
    "DEFAULT_LEVELS",
    "LEVEL_DIM",
    "LevelKind",
    "LevelRequest",
    "VerticalAxis",
    "default_level",
    "describe_vertical",
    "format_level",
    "interpolate_levels",
    "labels_from_listing",
    "level_labels",
    "parse_level",
    "section_weights",
    "section_scores",
    "select_level",
    "scalar_level",
]

#: The canonical name of the vertical dimension after :func:`evaluation.io.normalise`.
LEVEL_DIM = "level"


@dataclass(frozen=True)
class LevelKind:
    """One kind of vertical axis gridscore can interpolate in.

    ``display_units`` are the units levels are written in (tables, menus); ``log``
    says whether the interpolation is linear in the logarithm of the coordinate;
    ``positive`` is the CF direction of increasing values when the file does not say.
    """

    name: str
    dimension: str  # "pressure" or "length": what a requested level must measure
    display_units: str
    log: bool
    positive: str


#: Axis kinds gridscore interpolates in.  Pressure: linear in ln p, the usual choice for
#: atmospheric pressure levels (temperature and geopotential vary nearly linearly with
#: ln p; common practice).  Height and depth: linear in the coordinate itself.
KINDS: dict[str, LevelKind] = {
    "pressure": LevelKind("pressure", "pressure", "hPa", log=True, positive="down"),
    "height": LevelKind("height", "length", "m", log=False, positive="up"),
    "depth": LevelKind("depth", "length", "m", log=False, positive="down"),
}

#: CF standard names of dimensional vertical coordinates -> kind (CF standard name table).
STANDARD_NAME_KINDS: dict[str, str] = {
    "air_pressure": "pressure",
    "sea_water_pressure": "pressure",
    "height": "height",
    "altitude": "height",
    "height_above_mean_sea_level": "height",
    "height_above_geopotential_datum": "height",
    "height_above_reference_ellipsoid": "height",
    "geopotential_height": "height",
    "depth": "depth",
    "depth_below_geoid": "depth",
    "depth_below_sea_floor": "depth",
}

#: Model-level coordinates (CF appendix D: dimensionless vertical coordinates, and level
#: numbers).  Turning them into pressure or height needs the surface pressure or the
#: orography in every column, which gridscore does not do: such variables are refused
#: with this description as the reason.
MODEL_LEVEL_NAMES: dict[str, str] = {
    "model_level_number": "model level numbers",
    "atmosphere_hybrid_sigma_pressure_coordinate": "hybrid sigma-pressure model levels",
    "atmosphere_hybrid_height_coordinate": "hybrid height model levels",
    "atmosphere_sigma_coordinate": "sigma model levels",
    "sigma_coordinate": "sigma model levels",
    "atmosphere_sleve_coordinate": "SLEVE model levels",
    "atmosphere_ln_pressure_coordinate": "log-pressure model levels",
    "ocean_sigma_coordinate": "ocean sigma levels",
    "ocean_s_coordinate": "ocean s-coordinate levels",
    "ocean_s_coordinate_g1": "ocean s-coordinate levels",
    "ocean_s_coordinate_g2": "ocean s-coordinate levels",
    "ocean_sigma_z_coordinate": "ocean sigma-z levels",
    "ocean_double_sigma_coordinate": "ocean double-sigma levels",
}

#: Length coordinates: CF requires ``positive`` for them (section 4.3); its value decides.
POSITIVE_KINDS: dict[str, str] = {"up": "height", "down": "depth"}

#: pint dimensionality (as text) -> what a level of those units measures.
_DIMENSIONS: dict[str, str] = {
    "[mass] / [length] / [time] ** 2": "pressure",
    "[length]": "length",
}

_LEVEL_TEXT = re.compile(r"^\s*([-+]?(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][-+]?\d+)?)\s*(\S.*?)\s*$")


def _attr(var: xr.Variable | xr.DataArray, key: str) -> str | None:
    value = var.attrs.get(key, var.encoding.get(key))
    return None if value is None else str(value).strip()


def _measures(units: str | None) -> str | None:
    """``"pressure"``, ``"length"`` or ``None`` for a unit string (unreadable: ``None``)."""
    if not units:
        return None
    try:
        return _DIMENSIONS.get(str(parse_units(units).dimensionality))
    except InputError:
        return None


@dataclass(frozen=True)
class VerticalAxis:
    """A vertical coordinate found in a file.

    ``kind`` is a key of :data:`KINDS`, or ``None`` when the levels cannot be
    interpolated (model levels, or missing/contradictory attributes): ``problem`` then
    says why, in words for people.
    """

    name: str
    values: np.ndarray
    units: str
    positive: str
    kind: str | None
    problem: str = ""
    pressure: str = ""  # model levels: the variable holding the pressure of every level

    def labels(self) -> list[str]:
        """Each level as people read it (``850 hPa``); model levels as plain numbers."""
        if self.kind is None:
            return [f"{v:g}" for v in self.values]
        return [format_level(v, self.units, self.kind) for v in self.values]

    def listing(self) -> str:
        """The levels in one line, for listings and remedies: ``1000, 850, 500 hPa``."""
        if self.pressure:
            return f"{self.values.size} model levels, pressure from '{self.pressure}'"
        if self.kind is None:
            return ", ".join(self.labels())
        unit = KINDS[self.kind].display_units
        return ", ".join(label.rsplit(" ", 1)[0] for label in self.labels()) + f" {unit}"


def _is_vertical(var: xr.Variable) -> bool:
    """Whether CF attributes mark a 1-D coordinate as vertical (cf-conventions 4.3)."""
    standard_name = _attr(var, "standard_name")
    if standard_name in STANDARD_NAME_KINDS or standard_name in MODEL_LEVEL_NAMES:
        return True
    if (_attr(var, "axis") or "").upper() == "Z":
        return True
    if (_attr(var, "positive") or "").lower() in POSITIVE_KINDS:
        return True
    return _measures(_attr(var, "units")) == "pressure"


def describe_vertical(ds: xr.Dataset, dim: str) -> VerticalAxis | None:
    """The vertical axis along dimension ``dim`` of ``ds``, or ``None`` when it is not one.

    Parameters
    ----------
    ds
        A dataset as read from a file (decoded or not); only attributes and the 1-D
        coordinate values of ``dim`` are read.
    dim
        A dimension name.

    Notes
    -----
    Missing values in the coordinate (a ``_FillValue`` on a coordinate variable) are
    kept as NaN; a coordinate with NaN levels is described with a problem.
    """
    if dim not in ds.variables or ds.variables[dim].dims != (dim,):
        return None
    var = ds.variables[dim]
    if not _is_vertical(var):
        return None
    values = np.asarray(var.values, dtype="float64")
    fill = var.attrs.get("_FillValue", var.encoding.get("_FillValue"))
    if fill is not None:  # an undecoded coordinate may still hold its fill value
        values = np.where(values == float(fill), np.nan, values)
    units = _attr(var, "units") or ""
    positive = (_attr(var, "positive") or "").lower()
    standard_name = _attr(var, "standard_name") or ""
    if standard_name in MODEL_LEVEL_NAMES:
        return VerticalAxis(
            dim, values, units, positive, None,
            f"its vertical axis '{dim}' holds {MODEL_LEVEL_NAMES[standard_name]}, and interpolation from model levels to "
            "pressure is not offered unless the file holds the pressure of every level (standard_name air_pressure)",
        )
    measures = _measures(units)
    kind = STANDARD_NAME_KINDS.get(standard_name)
    if kind is None and measures == "pressure":
        kind = "pressure"
    elif kind is None and measures == "length":
        kind = POSITIVE_KINDS.get(positive)
        if kind is None:
            return VerticalAxis(dim, values, units, positive, None,
                                f"its vertical axis '{dim}' is in {units} without a 'positive' attribute (height or depth?)")
    if kind is None:
        return VerticalAxis(dim, values, units, positive, None,
                            f"the units '{units or 'none'}' of its vertical axis '{dim}' are not a pressure or a length")
    if measures != KINDS[kind].dimension:
        return VerticalAxis(dim, values, units, positive, None,
                            f"the units '{units or 'none'}' of its vertical axis '{dim}' do not fit its standard_name '{standard_name}'")
    if not np.all(np.isfinite(values)):
        return VerticalAxis(dim, values, units, positive, None, f"its vertical axis '{dim}' has missing level values")
    if kind == "pressure" and np.any(values <= 0):
        return VerticalAxis(dim, values, units, positive, None, f"its pressure axis '{dim}' has levels at or below zero")
    return VerticalAxis(dim, values, units, positive or KINDS[kind].positive, kind)


def scalar_level(ds: xr.Dataset, name: str) -> str:
    """The level that a CF scalar coordinate named in the ``coordinates`` attribute of
    variable ``name`` gives (``height = 2 m``, ``plev = 50000 Pa``; cf-conventions 5.7), as
    :meth:`VerticalAxis.labels` writes it, or '' when it has none.  Only the variable's own
    ``coordinates`` count: xarray attaches a dataset's scalar coordinates to every variable."""
    var = ds.variables[name]
    for coord_name in str(var.encoding.get("coordinates", var.attrs.get("coordinates", ""))).split():
        coord = ds.variables.get(coord_name)
        if coord is None or coord.ndim != 0:
            continue
        axis = describe_vertical(xr.Dataset(coords={coord_name: ((coord_name,), [coord.values], coord.attrs)}), coord_name)
        if axis is not None and axis.kind is not None:
            return axis.labels()[0]
    return ""


def format_level(value: float, units: str, kind: str) -> str:
    """A level as people read it, in the kind's display units: ``850 hPa``, ``2 m``."""
    target = KINDS[kind].display_units
    a, b = conversion(units, target)
    shown = a * float(value) + b
    return f"{float(f'{shown:.6g}'):g} {target}"


@dataclass(frozen=True)
class LevelRequest:
    """A level asked for: a value with units (``850hPa``, ``85000 Pa``, ``2m``)."""

    value: float
    units: str
    dimension: str  # "pressure" or "length"

    def label(self, kind: str | None = None) -> str:
        """The canonical text (``850 hPa``); lengths need the axis kind only for its units."""
        kind = kind or ("pressure" if self.dimension == "pressure" else "height")
        return format_level(self.value, self.units, kind)

    def value_in(self, units: str) -> float:
        a, b = conversion(self.units, units)
        return a * self.value + b


def parse_level(text: str) -> LevelRequest:
    """Read ``VALUE+UNITS`` (``850hPa``, ``85000 Pa``, ``2m``, ``100 m``) with pint.

    Raises
    ------
    InputError
        When the text is not a number followed by units of pressure or length.
    """
    match = _LEVEL_TEXT.match(str(text))
    example = "e.g. --level 850hPa, --level 85000Pa or --level 2m"
    if not match:
        raise InputError(f"'{text}' is not a level (a number followed by units)", remedy=f"write a value with units, {example}")
    value, units = float(match.group(1)), match.group(2)
    measures = _measures(units)
    if measures is None:
        raise InputError(f"the units '{units}' of the level '{text}' are not a pressure or a length", remedy=f"use hPa, Pa or m, {example}")
    if measures == "pressure" and value <= 0:
        raise InputError(f"the pressure level '{text}' is not above zero", remedy="give a positive pressure, e.g. 850hPa")
    return LevelRequest(value, units, measures)


def level_labels(da: xr.DataArray) -> list[str]:
    """The levels of a normalised variable as text (empty when it has none)."""
    if LEVEL_DIM not in da.dims:
        return []
    coord = da[LEVEL_DIM]
    kind = coord.attrs.get("level_kind")
    return [format_level(v, coord.attrs["units"], kind) for v in coord.values] if kind else []


def _listing(values: np.ndarray, units: str, kind: str) -> str:
    return VerticalAxis("", values, units, KINDS[kind].positive, kind).listing()


def _vertical_of(da: xr.DataArray) -> tuple[np.ndarray, str, str]:
    coord = da[LEVEL_DIM]
    kind = str(coord.attrs.get("level_kind", ""))
    if kind not in KINDS:
        raise InputError("the vertical axis of the variable is not a pressure, height or depth axis", remedy="give CF attributes to its vertical coordinate")
    return np.asarray(coord.values, dtype="float64"), str(coord.attrs["units"]), kind


def _pairs(source: np.ndarray, targets: np.ndarray, *, log: bool) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """For each target level: the indices of the two source levels around it, the weight
    of the second, and whether it lies within the source levels.

    Hand-written rather than ``xarray.DataArray.interp``: the weights are all that is
    needed, they keep the interpolation a lazy sum of two levels (only those are read),
    and a target equal to a source level takes that level alone, so a missing neighbour
    (below the surface) does not spoil it.
    """
    coord = np.log(source) if log else source
    wanted = np.log(targets) if log else targets
    order = np.argsort(coord, kind="stable")
    sorted_coord = coord[order]
    inside = (wanted >= sorted_coord[0] - 1e-12 * abs(sorted_coord[0])) & (wanted <= sorted_coord[-1] + 1e-12 * abs(sorted_coord[-1]))
    upper = np.clip(np.searchsorted(sorted_coord, wanted, side="left"), 1, max(coord.size - 1, 1))
    lower = upper - 1
    if coord.size == 1:
        lower = upper = np.zeros_like(upper)
    lo_c, hi_c = sorted_coord[lower], sorted_coord[upper]
    span = np.where(hi_c > lo_c, hi_c - lo_c, 1.0)
    weight = np.clip((wanted - lo_c) / span, 0.0, 1.0)
    exact_lo = np.isclose(wanted, lo_c, rtol=1e-9, atol=0.0)
    exact_hi = np.isclose(wanted, hi_c, rtol=1e-9, atol=0.0)
    lower = np.where(exact_hi, upper, lower)
    upper = np.where(exact_lo, lower, upper)
    weight = np.where(exact_lo | exact_hi, 0.0, weight)
    return order[lower], order[upper], weight, inside


def interpolate_levels(da: xr.DataArray, targets: Sequence[float], *, units: str) -> xr.DataArray:
    """``da`` on the levels ``targets`` (given in ``units``), NaN outside its own levels.

    Parameters
    ----------
    da
        A normalised variable with the dimension ``level`` (any other dimensions, lazy
        or not).
    targets
        Levels wanted, in ``units``.
    units
        Units of ``targets``; converted to the variable's level units with pint.

    Returns
    -------
    DataArray
        The dimension ``level`` replaced by the targets (coordinate in ``units``, with
        the source coordinate's attributes).  Lazy when ``da`` is.

    Notes
    -----
    Linear in ln p on pressure axes, linear in the coordinate on height and depth axes.
    A target outside the source's levels is NaN (never extrapolated); a target equal to a
    source level is that level exactly.  NaN in either neighbouring level (for instance
    below the surface) gives NaN.
    """
    source, source_units, kind = _vertical_of(da)
    a, b = conversion(units, source_units)
    wanted = a * np.asarray(targets, dtype="float64") + b
    lower, upper, weight, inside = _pairs(source, wanted, log=KINDS[kind].log)
    bare = da.drop_vars(LEVEL_DIM)
    lo, hi = bare.isel({LEVEL_DIM: lower}), bare.isel({LEVEL_DIM: upper})
    w = xr.DataArray(weight, dims=LEVEL_DIM)
    out = (lo * (1.0 - w) + hi * w).where(xr.DataArray(inside, dims=LEVEL_DIM))
    out = out.assign_coords({LEVEL_DIM: (LEVEL_DIM, np.asarray(targets, dtype="float64"), {**da[LEVEL_DIM].attrs, "units": units})})
    out.attrs = dict(da.attrs)
    out.name = da.name
    return out.transpose(*da.dims)


def select_level(
    da: xr.DataArray,
    level: str | LevelRequest | None,
    *,
    source: str,
    files: Sequence[str] | str | None = None,
) -> xr.DataArray:
    """The variable on one level: taken as it is, or interpolated between two levels.

    Parameters
    ----------
    da
        A normalised variable (see :func:`evaluation.io.normalise`).
    level
        ``"850hPa"``, a :class:`LevelRequest`, or ``None`` for a variable without levels.
    source
        Name of the source, for messages.
    files
        The source's files, named in messages.

    Returns
    -------
    DataArray
        Without the ``level`` dimension; its attribute ``level`` holds the canonical text
        (``850 hPa``) when a level was chosen.

    Raises
    ------
    InputError
        Several levels and no level asked for (the levels are listed); a level asked for
        a variable without levels (unless it is the one level the file stored); a level of
        another kind (pressure for a height axis); a level outside the source's levels.

    Notes
    -----
    See :func:`interpolate_levels` for NaN (below the surface) and the interpolation.
    """
    where = files if files else source
    name = da.name
    if level is None:
        if LEVEL_DIM in da.dims and da[LEVEL_DIM].attrs.get("level_kind") == "model":
            raise InputError(
                f"variable '{name}' of '{source}' is on {da.sizes[LEVEL_DIM]} model levels and no level was chosen",
                file=where,
                remedy="choose a pressure with --level, e.g. --level 500hPa (interpolated in each column in ln p)",
            )
        if LEVEL_DIM in da.dims:
            values, units, kind = _vertical_of(da)
            example = format_level(values[len(values) // 2], units, kind).replace(" ", "")
            raise InputError(
                f"variable '{name}' of '{source}' has {values.size} levels ({_listing(values, units, kind)}) and no level was chosen",
                file=where,
                remedy=f"choose one with --level, e.g. --level {example}",
            )
        return da
    request = parse_level(level) if isinstance(level, str) else level
    if LEVEL_DIM not in da.dims:
        stored = da.attrs.get("gridscore_single_level")
        if stored:
            stored_request = parse_level(stored)
            if stored_request.dimension == request.dimension and np.isclose(stored_request.value_in(request.units), request.value, rtol=1e-9):
                return da.assign_attrs(level=stored)
            raise InputError(
                f"variable '{name}' of '{source}' is stored on the single level {stored}, not {request.label()}",
                file=where,
                remedy=f"choose --level {stored.replace(' ', '')} or leave --level out",
            )
        raise InputError(
            f"variable '{name}' of '{source}' has no vertical levels",
            file=where,
            remedy="leave --level out for this variable, or, if the file holds it on one level that only an attribute names, "
            "give that level as a CF scalar coordinate (e.g. plev = 50000 Pa with standard_name air_pressure, named in the variable's coordinates attribute)",
        )
    if da[LEVEL_DIM].attrs.get("level_kind") == "model":
        return _column_level(da, request, source=source, where=where)
    values, units, kind = _vertical_of(da)
    if KINDS[kind].dimension != request.dimension:
        raise InputError(
            f"variable '{name}' of '{source}' is on {kind} levels, but the level asked for ({request.value:g} {request.units}) is a {request.dimension}",
            file=where,
            remedy=f"give a level in {KINDS[kind].display_units}, one of {_listing(values, units, kind)}",
        )
    wanted = request.value_in(units)
    label = format_level(wanted, units, kind)
    lower, upper, _, inside = _pairs(values, np.array([wanted]), log=KINDS[kind].log)
    if not inside[0]:
        raise InputError(
            f"level {label} lies outside the levels of '{source}' ({_listing(values, units, kind)}); gridscore does not extrapolate",
            file=where,
            remedy="choose a level within the levels every source has",
        )
    out = interpolate_levels(da, [request.value], units=request.units).isel({LEVEL_DIM: 0}, drop=True)
    out.attrs = {**da.attrs, "level": label}
    return out


#: Name of the coordinate holding the pressure of every model level (see io.get_variable).
COLUMN_PRESSURE = "level_pressure"


def _column_kernel(values: np.ndarray, pressure: np.ndarray, target: float) -> np.ndarray:
    """Linear interpolation in ln p along the last axis, column by column; NaN outside.

    Hand-written because the pressure differs in every column: numpy.interp takes one
    abscissa, and a Python loop over columns would be slow.  The levels may be ordered
    either way.
    """
    ln_p = np.log(np.where(pressure > 0, pressure, np.nan))
    flip = ln_p[..., :1] > ln_p[..., -1:]
    ln_p = np.where(flip, ln_p[..., ::-1], ln_p)
    values = np.where(flip, values[..., ::-1], values)
    t = np.log(target)
    n = ln_p.shape[-1]
    above = np.sum(ln_p < t, axis=-1)
    lower = np.clip(above - 1, 0, n - 2)[..., None]
    lo_p, hi_p = np.take_along_axis(ln_p, lower, -1)[..., 0], np.take_along_axis(ln_p, lower + 1, -1)[..., 0]
    lo_v, hi_v = np.take_along_axis(values, lower, -1)[..., 0], np.take_along_axis(values, lower + 1, -1)[..., 0]
    with np.errstate(invalid="ignore", divide="ignore"):
        w = (t - lo_p) / (hi_p - lo_p)
        out = np.where(np.isclose(t, hi_p, rtol=1e-12, atol=0.0), hi_v, np.where(w == 0, lo_v, lo_v * (1 - w) + hi_v * w))
    inside = (t >= lo_p - 1e-12) & (t <= hi_p + 1e-12)
    return np.where(inside, out, np.nan)


def _column_level(da: xr.DataArray, request: LevelRequest, *, source: str, where) -> xr.DataArray:
    """A pressure level from model levels with the pressure of every level in the file."""
    if request.dimension != "pressure" or COLUMN_PRESSURE not in da.coords:
        raise InputError(
            f"variable '{da.name}' of '{source}' is on model levels: only a pressure can be asked for",
            file=where,
            remedy="give a level in hPa, e.g. --level 500hPa",
        )
    pressure = da[COLUMN_PRESSURE]
    target = request.value_in(str(pressure.attrs.get("units", "Pa")))
    # one time step tells whether the level lies within the model's levels anywhere (a
    # level above the model top everywhere would otherwise be a field of missing values)
    first = pressure.isel(time=0) if "time" in pressure.dims else pressure
    low, high = float(first.min()), float(first.max())
    if not low <= target <= high:
        shown = f"{format_level(low, str(pressure.attrs.get('units', 'Pa')), 'pressure')} to {format_level(high, str(pressure.attrs.get('units', 'Pa')), 'pressure')}"
        raise InputError(
            f"level {request.label('pressure')} lies outside the pressures of the model levels of '{source}' ({shown}); gridscore does not extrapolate",
            file=where,
            remedy="choose a level within the levels every source has",
        )
    bare = da.drop_vars(COLUMN_PRESSURE)
    out = xr.apply_ufunc(
        _column_kernel, bare, pressure.drop_vars([c for c in pressure.coords if c != LEVEL_DIM and c not in bare.coords], errors="ignore"),
        kwargs={"target": target},
        input_core_dims=[[LEVEL_DIM], [LEVEL_DIM]],
        dask="parallelized",
        output_dtypes=[np.float64],
    )
    out = out.drop_vars(LEVEL_DIM, errors="ignore").transpose(*[d for d in da.dims if d != LEVEL_DIM])
    label = request.label("pressure")
    out.attrs = {**da.attrs, "level": label}
    out.name = da.name
    return out


# --------------------------------------------------------------------------------------
# zonal-mean sections
# --------------------------------------------------------------------------------------


def _layer_thickness(values: np.ndarray) -> np.ndarray:
    """Thickness of the layer each level stands for: half-way to each neighbour, the
    outermost layers ending at the outermost levels (the trapezoidal rule in the vertical
    coordinate; common practice).  One level has thickness 1."""
    if values.size == 1:
        return np.ones(1)
    order = np.argsort(values)
    v = values[order]
    edges = np.concatenate([[v[0]], 0.5 * (v[1:] + v[:-1]), [v[-1]]])
    thickness = np.empty_like(v)
    thickness[order] = np.diff(edges)
    return thickness


def section_weights(section: xr.DataArray, lat_bnds: xr.DataArray | np.ndarray) -> xr.DataArray:
    """Weights ``(level, lat)`` of a zonal-mean section: Δp (or Δz) × Δ sin φ.

    Parameters
    ----------
    section
        A field with dimensions ``level`` and ``lat`` (the coordinate of ``level`` in any
        units of pressure or length).
    lat_bnds
        Latitude bounds ``(lat, 2)`` in degrees.

    Notes
    -----
    Δp is the pressure thickness of the layer each level stands for (half-way to each
    neighbouring level; the trapezoidal rule), so that a Δp-weighted mean is a
    mass-weighted mean of the layer (common practice for pressure-level diagnostics).  On
    height and depth axes Δz takes its place.  The area of a latitude band is
    2πR²·(sin φ_north − sin φ_south) (Archimedes' hat-box theorem), so Δ sin φ weights
    each band by its area.
    """
    levels = np.asarray(section[LEVEL_DIM].values, dtype="float64")
    bounds = np.radians(np.asarray(lat_bnds, dtype="float64"))
    band = np.abs(np.sin(bounds[:, 1]) - np.sin(bounds[:, 0]))
    dz = _layer_thickness(levels)
    return xr.DataArray(np.outer(dz, band), dims=(LEVEL_DIM, "lat"), coords={LEVEL_DIM: section[LEVEL_DIM], "lat": section["lat"]})


def section_scores(run: xr.DataArray, ref: xr.DataArray, weights: xr.DataArray) -> dict[str, float]:
    """Bias and RMSE of a zonal-mean section against the reference's.

    ``bias = Σ w (m − r) / Σ w`` and ``rmse = sqrt(Σ w (m − r)² / Σ w)`` over the
    cells where both sections have values, with ``w`` from :func:`section_weights`.

    Notes
    -----
    Cells missing in either section (below the surface, outside a source's levels) are
    left out of both sums; no common cell gives NaN for both.
    """
    m = np.asarray(run.transpose(LEVEL_DIM, "lat").values, dtype="float64")
    r = np.asarray(ref.transpose(LEVEL_DIM, "lat").values, dtype="float64")
    w = np.asarray(weights.transpose(LEVEL_DIM, "lat").values, dtype="float64")
    ok = np.isfinite(m) & np.isfinite(r) & (w > 0)
    if not ok.any():
        return {"bias": float("nan"), "rmse": float("nan")}
    d, w = (m - r)[ok], w[ok]
    return {"bias": float(np.sum(w * d) / np.sum(w)), "rmse": float(np.sqrt(np.sum(w * d * d) / np.sum(w)))}


def vertical_block(ds: xr.Dataset, var: xr.DataArray, extra: Sequence[str]) -> tuple[str, VerticalAxis | None, str]:
    """What :func:`evaluation.io.normalise` does with a variable's extra dimensions.

    Returns ``(action, axis, text)``: ``("squeeze", axis-or-None, level text)`` for
    dimensions of length one, ``("keep", axis, "")`` for one vertical axis of several
    levels, ``("refuse", axis-or-None, reason)`` otherwise.
    """
    several = [d for d in extra if var.sizes[d] > 1]
    if not several:
        single = next((a for a in (describe_vertical(ds, d) for d in extra) if a is not None), None)
        text = single.labels()[0] if single is not None and single.kind is not None else ""
        return "squeeze", single, text
    axes = {d: describe_vertical(ds, d) for d in several}
    vertical = [a for a in axes.values() if a is not None]
    others = [d for d, a in axes.items() if a is None]
    if others:
        shown = ", ".join(f"'{d}' ({var.sizes[d]})" for d in others)
        return "refuse", None, f"it has the dimension {shown} that is neither time, latitude, longitude nor a vertical axis found by CF attributes"
    if len(vertical) > 1:
        return "refuse", None, f"it has several vertical axes ({', '.join(a.name for a in vertical)})"
    axis = vertical[0]
    if axis.kind is None:
        pressure = _pressure_companion(ds, var, axis) if _attr(ds.variables[axis.name], "standard_name") in MODEL_LEVEL_NAMES else ""
        if pressure:
            return "keep", VerticalAxis(axis.name, axis.values, axis.units, axis.positive, None, pressure=pressure), ""
        return "refuse", axis, axis.problem
    return "keep", axis, ""


def _pressure_companion(ds: xr.Dataset, var: xr.DataArray, axis: VerticalAxis) -> str:
    """The variable of ``ds`` holding the pressure of every model level of ``var``, or ''.

    It must have ``standard_name = air_pressure`` (or units of pressure), the model-level
    dimension, and no dimension ``var`` lacks (CF 4.3.3 lets a file carry it as an
    auxiliary coordinate or a data variable).
    """
    for name, candidate in ds.variables.items():
        if name == axis.name or axis.name not in candidate.dims or not set(candidate.dims) <= set(var.dims):
            continue
        if _attr(candidate, "standard_name") == "air_pressure" or (
            candidate.ndim > 1 and _measures(_attr(candidate, "units")) == "pressure"
        ):
            return str(name)
    return ""


def level_coordinate(axis: VerticalAxis, ds: xr.Dataset) -> xr.Variable:
    """The ``level`` coordinate of a kept vertical axis: values, units, positive and kind."""
    source = ds.variables[axis.name]
    attrs: Mapping[str, object] = {
        "units": axis.units,
        "positive": axis.positive,
        "level_kind": axis.kind or "model",
        "axis": "Z",
        "long_name": str(source.attrs.get("long_name", f"{axis.kind or 'model'} level")),
        "original_name": axis.name,
        **({"pressure_variable": axis.pressure} if axis.pressure else {}),
    }
    standard_name = _attr(source, "standard_name")
    if standard_name:
        attrs = {**attrs, "standard_name": standard_name}
    return xr.Variable(LEVEL_DIM, axis.values, dict(attrs))


#: The level a level variable is shown on first, per kind: 500 hPa, the classic
#: mid-troposphere level (common practice); the lowest height and the shallowest depth.
DEFAULT_LEVELS: dict[str, float] = {"pressure": 50000.0, "height": 0.0, "depth": 0.0}
_SI = {"pressure": "Pa", "height": "m", "depth": "m"}


def default_level(labels: Sequence[str]) -> str:
    """The entry of ``labels`` (``["1000 hPa", "850 hPa", ...]``) to show first; ``""`` for none.

    Notes
    -----
    The level nearest :data:`DEFAULT_LEVELS` of its kind; labels that cannot be read are
    skipped; no readable label gives ``""``.
    """
    best, distance = "", np.inf
    for label in labels:
        try:
            request = parse_level(label)
        except InputError:
            continue
        kind = "pressure" if request.dimension == "pressure" else "height"
        gap = abs(request.value_in(_SI[kind]) - DEFAULT_LEVELS[kind])
        if gap < distance:
            best, distance = label, gap
    return best


def labels_from_listing(text: str) -> list[str]:
    """``"1000, 850, 500 hPa"`` (a file listing, :meth:`VerticalAxis.listing`) as ``["1000 hPa", ...]``."""
    text = str(text).strip()
    if not text or " " not in text:
        return []
    values, _, unit = text.rpartition(" ")
    labels = [f"{v.strip()} {unit}" for v in values.split(",") if v.strip()]
    try:
        for label in labels:
            parse_level(label)
    except InputError:  # model levels: any pressure may be asked for, none is listed
        return []
    return labels
