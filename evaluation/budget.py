"""Top-of-atmosphere energy budget and the zero-dimensional equilibrium temperature.

The global budget of a run is read from four monthly fields: incoming shortwave
(``rsdt``), reflected shortwave (``rsut``) and outgoing longwave (``rlut``) flux at the top
of the atmosphere, and near-surface air temperature (``tas``).  From their area-weighted
global means over a period follow

* the net downward flux ``rsdt - rsut - rlut`` and its drift (OLS per century),
* the planetary albedo ``A = rsut / rsdt`` (a ratio of global means),
* the effective emissivity ``eps = rlut / (sigma T_s^4)``,
* the solar constant ``S = 4 rsdt`` (the sphere's area is four times its disc's),
* the equilibrium temperature ``T_e = ((1 - A) S / (4 eps sigma))^(1/4)`` of the
  zero-dimensional energy-balance model (Stefan-Boltzmann law), and ``T_e - T_s``.

With these definitions ``T_e = T_s ((rsdt - rsut) / rlut)^(1/4)``: a run that absorbs
more than it emits (positive net flux) has ``T_e > T_s``, so ``t_difference`` shows how far
its surface is from the temperature that would balance the budget.
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping
from dataclasses import dataclass
from os.path import basename
from typing import TYPE_CHECKING

import dask
import numpy as np
import pandas as pd
import xarray as xr
from numpy.typing import ArrayLike

from . import io
from .errors import InputError
from .grid import same_grid
from .metrics import weighted_mean
from .names import repeated
from .timeaxis import Period, complete_years, default_period, parse_period, season_means
from .trends import ols_trend
from .units import convert

if TYPE_CHECKING:
    from .scoring import Source

__all__ = [
    "BUDGET_COLUMNS",
    "BUDGET_FIELDS",
    "BUDGET_METRICS",
    "OBSERVED_ESTIMATES",
    "STEFAN_BOLTZMANN",
    "BudgetField",
    "ObservedEstimate",
    "budget_numbers",
    "budget_series",
    "budget_table",
    "effective_emissivity",
    "equilibrium_temperature",
    "observed_table",
    "planetary_albedo",
]

#: Stefan-Boltzmann constant, W m-2 K-4 (CODATA 2018 exact value).
STEFAN_BOLTZMANN = 5.670374419e-8

BUDGET_COLUMNS = ["model", "period", "metric", "value", "units"]

#: Metric -> units, in the order the table lists them.
BUDGET_METRICS: dict[str, str] = {
    "toa_net": "W m-2",
    "toa_net_drift": "W m-2/century",
    "albedo": "1",
    "emissivity": "1",
    "solar_constant": "W m-2",
    "t_surface": "K",
    "t_equilibrium": "K",
    "t_difference": "K",
}


@dataclass(frozen=True)
class BudgetField:
    """One input of the budget: usual name, CF standard name and the units used."""

    name: str
    standard_name: str
    units: str


BUDGET_FIELDS = (
    BudgetField("rsdt", "toa_incoming_shortwave_flux", "W m-2"),
    BudgetField("rsut", "toa_outgoing_shortwave_flux", "W m-2"),
    BudgetField("rlut", "toa_outgoing_longwave_flux", "W m-2"),
    BudgetField("tas", "air_temperature", "K"),
)


@dataclass(frozen=True)
class ObservedEstimate:
    """A published global, annual-mean estimate of the TOA budget (W m-2)."""

    reference: str
    period: str
    rsdt: float
    rsut: float
    rlut: float
    toa_net: float
    note: str

    @property
    def albedo(self) -> float:
        return self.rsut / self.rsdt


# Values from memory, rounded; check them against the publications before quoting them.
OBSERVED_ESTIMATES: tuple[ObservedEstimate, ...] = (
    ObservedEstimate(
        reference="Loeb et al. (2018), J. Climate 31, 895-918: CERES EBAF Ed4.0",
        period="2005-2015",
        rsdt=340.0,
        rsut=99.1,
        rlut=240.2,
        toa_net=0.7,
        note="value from memory; satellite era, net flux anchored to ocean heat uptake",
    ),
    ObservedEstimate(
        reference="Trenberth, Fasullo and Kiehl (2009), Bull. Amer. Meteor. Soc. 90, 311-323",
        period="2000-2004",
        rsdt=341.3,
        rsut=101.9,
        rlut=238.5,
        toa_net=0.9,
        note="value from memory; March 2000 to May 2004, net flux set to 0.9 W m-2 from ocean heat uptake",
    ),
)


# ---------------------------------------------------------------------------- formulas
def _quiet(fn):
    """Run ``fn`` with numpy's invalid/divide warnings off: undefined values become NaN."""
    with np.errstate(invalid="ignore", divide="ignore"):
        return fn()


def _scalar_or_array(value: np.ndarray) -> float | np.ndarray:
    return float(value) if np.ndim(value) == 0 else value


def equilibrium_temperature(
    solar_constant: ArrayLike, albedo: ArrayLike, emissivity: ArrayLike
) -> float | np.ndarray:
    """Zero-dimensional radiative equilibrium temperature (K).

    ``T_e = ((1 - A) S / (4 eps sigma))^(1/4)``: absorbed sunlight, spread over the sphere,
    equals the emission ``eps sigma T_e^4`` (Stefan-Boltzmann law).

    Parameters
    ----------
    solar_constant
        Total solar irradiance ``S`` (W m-2).
    albedo
        Planetary albedo ``A`` (1).
    emissivity
        Effective emissivity ``eps`` (1).

    Returns
    -------
    float or numpy.ndarray
        Broadcast over the arguments; a float for scalar input.

    Notes
    -----
    NaN input gives NaN.  A non-positive emissivity or absorbed flux (``A >= 1``) has no
    physical equilibrium and gives NaN.
    """
    s, a, e = (np.asarray(v, dtype=np.float64) for v in (solar_constant, albedo, emissivity))
    absorbed = (1.0 - a) * s / 4.0
    ok = (e > 0) & (absorbed > 0)
    value = _quiet(lambda: np.where(ok, (absorbed / (e * STEFAN_BOLTZMANN)) ** 0.25, np.nan))
    return _scalar_or_array(value)


def planetary_albedo(rsdt_mean: ArrayLike, rsut_mean: ArrayLike) -> float | np.ndarray:
    """Planetary albedo, the ratio of global-mean reflected to incoming shortwave flux.

    Notes
    -----
    Pass global (area-weighted) means: the mean of a cell-wise albedo field weights dark
    and bright cells by area, not by the sunlight they receive, and differs.  NaN input or
    a non-positive incoming flux gives NaN.
    """
    sd, su = np.asarray(rsdt_mean, dtype=np.float64), np.asarray(rsut_mean, dtype=np.float64)
    return _scalar_or_array(_quiet(lambda: np.where(sd > 0, su / sd, np.nan)))


def effective_emissivity(rlut_mean: ArrayLike, t_surface: ArrayLike) -> float | np.ndarray:
    """Effective emissivity ``OLR / (sigma T_s^4)`` of the whole column.

    Parameters
    ----------
    rlut_mean
        Global-mean outgoing longwave flux (W m-2).
    t_surface
        Global-mean near-surface air temperature (K).

    Notes
    -----
    Uses the fourth power of the mean temperature (the zero-dimensional model), not the
    mean of ``T^4``.  NaN input or a non-positive temperature gives NaN.
    """
    olr, t = np.asarray(rlut_mean, dtype=np.float64), np.asarray(t_surface, dtype=np.float64)
    return _scalar_or_array(_quiet(lambda: np.where(t > 0, olr / (STEFAN_BOLTZMANN * t**4), np.nan)))


def budget_numbers(
    rsdt: xr.DataArray,
    rsut: xr.DataArray,
    rlut: xr.DataArray,
    tas: xr.DataArray,
    weights: xr.DataArray,
) -> dict[str, float]:
    """The global budget from the four fields.

    Parameters
    ----------
    rsdt, rsut, rlut
        Incoming, reflected shortwave and outgoing longwave TOA flux (W m-2), each
        ``(lat, lon)`` or ``(year, lat, lon)`` (for instance annual means).
    tas
        Near-surface air temperature (K), same layout.
    weights
        Cell areas ``(lat, lon)`` (any constant factor cancels).

    Returns
    -------
    dict
        ``rsdt``, ``rsut``, ``rlut`` (global means, W m-2) and every key of
        :data:`BUDGET_METRICS`.  With a ``year`` dimension the global means are taken per
        year and then averaged over the years, and ``toa_net_drift`` is the classical OLS
        slope of the yearly net flux, per century; without one it is NaN.

    Notes
    -----
    Cells where a field is NaN get zero weight in that field's mean; a year whose field
    is NaN everywhere is left out of the period mean and the drift.  Fewer than three
    years give a NaN drift.
    """
    means = {
        name: weighted_mean(da, weights)
        for name, da in (("rsdt", rsdt), ("rsut", rsut), ("rlut", rlut), ("tas", tas))
    }
    # One pass over the (possibly lazy) inputs for all four means.
    (computed,) = dask.compute(means)
    series = {k: v.astype(np.float64) for k, v in computed.items()}
    net = series["rsdt"] - series["rsut"] - series["rlut"]
    if "year" in net.dims:
        drift = ols_trend(net.values, net["year"].values, adjust=False).slope * 100.0
        period_mean = {
            k: float(v.mean("year", skipna=True)) if v.sizes["year"] else float("nan")
            for k, v in series.items()
        }
        toa_net = float(net.mean("year", skipna=True)) if net.sizes["year"] else float("nan")
    else:
        drift = float("nan")
        period_mean = {k: float(v) for k, v in series.items()}
        toa_net = float(net)
    albedo = float(planetary_albedo(period_mean["rsdt"], period_mean["rsut"]))
    emissivity = float(effective_emissivity(period_mean["rlut"], period_mean["tas"]))
    solar = 4.0 * period_mean["rsdt"]
    t_eq = float(equilibrium_temperature(solar, albedo, emissivity))
    return {
        "rsdt": period_mean["rsdt"],
        "rsut": period_mean["rsut"],
        "rlut": period_mean["rlut"],
        "toa_net": toa_net,
        "toa_net_drift": float(drift),
        "albedo": albedo,
        "emissivity": emissivity,
        "solar_constant": solar,
        "t_surface": period_mean["tas"],
        "t_equilibrium": t_eq,
        "t_difference": t_eq - period_mean["tas"],
    }


# ---------------------------------------------------------------------------- sources
def _file_list(files: list[str]) -> str:
    names = [basename(f) for f in files]
    return ", ".join(names) if len(names) <= 3 else f"{', '.join(names[:3])} (+{len(names) - 3} more)"


def _resolve_names(source: Source, files: list[str]) -> dict[str, str]:
    """Budget field -> variable name in the files; :class:`InputError` naming what is missing."""
    listing = io.variables_in(files)
    chosen: dict[str, str] = {}
    missing: list[BudgetField] = []
    for f in BUDGET_FIELDS:
        if f.name in listing:
            chosen[f.name] = f.name
            continue
        by_standard_name = sorted(
            n for n, meta in listing.items() if meta.get("standard_name") == f.standard_name
        )
        if by_standard_name:
            chosen[f.name] = by_standard_name[0]
        else:
            missing.append(f)
    if missing:
        what = ", ".join(f"{f.standard_name} ({f.name})" for f in missing)
        raise InputError(
            f"no {what} in {_file_list(files)}",
            file=source.name,
            remedy="add the variable to the source's files",
        )
    return chosen


def _open_fields(source: Source) -> tuple[dict[str, xr.DataArray], Period | None]:
    """The four monthly fields in budget units and the years all of them cover."""
    files = io.expand_paths(source.paths, source=source.name)
    names = _resolve_names(source, files)
    fields: dict[str, xr.DataArray] = {}
    spans: list[Period | None] = []
    for f in BUDGET_FIELDS:
        # Each field is opened on its own so that its own complete years count even when
        # the variables sit in files with different time spans.
        ds = io.open_source(files, variables=[names[f.name]], source=source.name)
        da = io.get_variable(ds, names[f.name], source=source.name)
        if "time" not in da.dims:
            raise InputError(
                f"variable '{names[f.name]}' has no time axis",
                file=source.name,
                remedy="give monthly time series",
            )
        fields[f.name] = convert(da, f.units, source=source.name)
        spans.append(complete_years(da["time"]))
    first = fields[BUDGET_FIELDS[0].name]
    for f in BUDGET_FIELDS[1:]:
        if not same_grid(first, fields[f.name]):
            raise InputError(
                f"'{names[f.name]}' is not on the grid of '{names[BUDGET_FIELDS[0].name]}'",
                file=source.name,
                remedy="give the four budget fields on one latitude-longitude grid",
            )
    if any(s is None for s in spans):
        return fields, None
    valid = [s for s in spans if s is not None]
    start, end = max(s.start for s in valid), min(s.end for s in valid)
    return fields, (Period(start, end) if start <= end else None)


def _check_covers(name: str, span: Period | None, period: Period) -> None:
    if span is None or not span.covers(period):
        raise InputError(
            f"does not cover the period {period} (complete years of all four budget fields: {span or 'none'})",
            file=name,
            remedy=f"choose a period within {span}"
            if span
            else "give at least twelve consecutive months of each field",
        )


def _annual(fields: Mapping[str, xr.DataArray], period: Period) -> dict[str, xr.DataArray]:
    return {name: season_means(da, "ANN", period) for name, da in fields.items()}


def _as_sources(source: Source | Iterable[Source]) -> list[Source]:
    # Duck-typed on `paths` so that budget.py need not import scoring at run time.
    items: list[Source] = [source] if hasattr(source, "paths") else list(source)  # type: ignore[list-item, arg-type]
    if not items:
        raise InputError("no model run given", remedy="add at least one --model NAME=PATH")
    names = [s.name for s in items]
    dupes = repeated(names)
    if dupes:
        raise InputError(
            f"source names must be unique (repeated: {', '.join(dupes)})", remedy="give each run its own name"
        )
    return items


def budget_table(source: Source | Iterable[Source], *, period: Period | str | None = None) -> pd.DataFrame:
    """The TOA budget of one or several runs as a tidy table.

    Parameters
    ----------
    source
        A :class:`evaluation.scoring.Source` or several.
    period
        ``Period`` or ``"YYYY-YYYY"``; ``None`` applies the default rule to all the
        sources together (WMO 1991-2020 when every one covers it, else their overlap).

    Returns
    -------
    pandas.DataFrame
        Columns ``model, period, metric, value, units``; one row per source and metric of
        :data:`BUDGET_METRICS`, in that order.

    Raises
    ------
    InputError
        A source lacks one of ``rsdt``, ``rsut``, ``rlut``, ``tas`` (by name or CF
        standard_name), its fields are on different grids or in unconvertible units, or it
        does not cover the period.

    Notes
    -----
    Annual means weight months by their length; only complete years count.  NaN cells
    get zero weight in the global means (see :func:`budget_numbers`).
    """
    sources = _as_sources(source)
    opened = [_open_fields(s) for s in sources]
    spans = [span for _, span in opened]
    if period is None:
        chosen = default_period(spans, names=[s.name for s in sources])
    else:
        chosen = parse_period(period)
    rows = []
    for src, (fields, span) in zip(sources, opened, strict=True):
        _check_covers(src.name, span, chosen)
        annual = _annual(fields, chosen)
        weights = fields["rsdt"]["cell_area"]
        numbers = budget_numbers(annual["rsdt"], annual["rsut"], annual["rlut"], annual["tas"], weights)
        for metric, units in BUDGET_METRICS.items():
            rows.append(
                {
                    "model": src.name,
                    "period": str(chosen),
                    "metric": metric,
                    "value": numbers[metric],
                    "units": units,
                }
            )
    return pd.DataFrame(rows, columns=BUDGET_COLUMNS)


def budget_provenance(sources: Iterable[Source], table: pd.DataFrame) -> dict:
    """The provenance of a budget table (``gridscore budget --output`` and the dashboard's
    download): the files that hold the four budget fields of each source with rows in
    ``table``, not every file of the sources."""
    from types import SimpleNamespace

    from .export import provenance

    shown = set(table["model"])
    used = []
    for src in _as_sources(sources):
        if src.name in shown:
            files = io.expand_paths(src.paths, source=src.name)
            names = _resolve_names(src, files)
            used.append(SimpleNamespace(name=src.name, role=src.role, paths=io.files_holding(files, list(names.values()), source=src.name)))
    periods = ",".join(sorted(set(map(str, table["period"]))))
    return provenance(sources=used, variable="toa budget", period=periods, seasons=["ANN"], regions={"global": "90°S to 90°N"}, regrid="none")


def budget_series(source: Source, *, period: Period | str | None = None) -> xr.DataArray:
    """Annual global-mean net downward TOA flux of one run (for the drift view).

    Parameters
    ----------
    source
        A :class:`evaluation.scoring.Source`.
    period
        ``Period`` or ``"YYYY-YYYY"``; ``None`` applies the default rule to this source.

    Returns
    -------
    xarray.DataArray
        Dimension ``year``, W m-2, computed (in memory).

    Notes
    -----
    Cells where a flux is NaN get zero weight; a year with no valid cell is NaN.
    """
    (src,) = _as_sources(source)
    fields, span = _open_fields(src)
    chosen = default_period([span], names=[src.name]) if period is None else parse_period(period)
    _check_covers(src.name, span, chosen)
    annual = _annual({k: fields[k] for k in ("rsdt", "rsut", "rlut")}, chosen)
    weights = fields["rsdt"]["cell_area"]
    gm = {k: weighted_mean(v, weights) for k, v in annual.items()}
    (gm,) = dask.compute(gm)
    net = (gm["rsdt"] - gm["rsut"] - gm["rlut"]).astype(np.float64)
    net = net.drop_vars([c for c in net.coords if c != "year"])
    net.name = "toa_net"
    net.attrs = {
        "units": "W m-2",
        "long_name": "global-mean net downward radiative flux at the top of the atmosphere",
        "period": str(chosen),
        "source": src.name,
    }
    return net


def observed_table() -> pd.DataFrame:
    """The published estimates of :data:`OBSERVED_ESTIMATES` as a tidy table.

    Columns ``reference, period, metric, value, units, note``; metrics ``rsdt rsut rlut
    toa_net albedo solar_constant`` (global annual means; the solar constant is four times
    the mean incoming flux).
    """
    rows = []
    for est in OBSERVED_ESTIMATES:
        values = {
            "rsdt": (est.rsdt, "W m-2"),
            "rsut": (est.rsut, "W m-2"),
            "rlut": (est.rlut, "W m-2"),
            "toa_net": (est.toa_net, "W m-2"),
            "albedo": (est.albedo, "1"),
            "solar_constant": (4.0 * est.rsdt, "W m-2"),
        }
        for metric, (value, units) in values.items():
            rows.append(
                {
                    "reference": est.reference,
                    "period": est.period,
                    "metric": metric,
                    "value": value,
                    "units": units,
                    "note": est.note,
                }
            )
    return pd.DataFrame(rows, columns=["reference", "period", "metric", "value", "units", "note"])
