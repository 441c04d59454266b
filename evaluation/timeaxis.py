"""Periods, seasons and month-length weights in any CF calendar.

A season is a tuple of months.  Seasons that cross the turn of the year (DJF) are
labelled by the year of their January, so DJF 1991 is December 1990 + January and
February 1991.  A season counts only where all its months are in the data.  Means over a
season weight each month by its length in the file's own calendar (a 360_day February
has 30 days, a noleap February 28).
"""

from __future__ import annotations

from collections.abc import Iterable

import cftime
import numpy as np
import xarray as xr

from .errors import InputError

# periods and seasons are plain text rules, kept importable without numpy (the warm cached path)
from .request import MONTH_NAMES, SEASONS, WMO_NORMAL, Period, parse_period, parse_season

__all__ = [
    "SEASONS",
    "MONTH_NAMES",
    "WMO_NORMAL",
    "Period",
    "parse_period",
    "parse_season",
    "season_label_years",
    "month_lengths",
    "season_means",
    "climatology",
    "monthly_climatology",
    "complete_years",
    "years_with_data",
    "default_period",
]

def _month_year(time: xr.DataArray) -> tuple[np.ndarray, np.ndarray]:
    values = time.values
    return (np.fromiter((t.month for t in values), dtype=int, count=values.size),
            np.fromiter((t.year for t in values), dtype=int, count=values.size))


def month_lengths(time: xr.DataArray) -> np.ndarray:
    """Length in days of the month of each time step, in the time axis' own calendar.

    Counted by cftime date arithmetic (first of the next month minus first of the month)
    rather than ``time.dt.days_in_month``, which applies one leap-year rule per year and
    so gives October 1582 of the mixed Julian/Gregorian standard calendar 31 days
    instead of 21.
    """
    out = np.empty(time.size, dtype="float64")
    for i, t in enumerate(time.values):
        first = cftime.datetime(t.year, t.month, 1, calendar=t.calendar)
        following = cftime.datetime(t.year + (t.month == 12), t.month % 12 + 1, 1, calendar=t.calendar)
        out[i] = (following - first).days
    return out


def season_label_years(time: xr.DataArray, season: str) -> np.ndarray:
    """The season label year of each time step (``-1`` for months outside the season).

    For a season that crosses the turn of the year (DJF), months at or after its first
    month belong to the next year's label.
    """
    months = SEASONS[parse_season(season)]
    month, year = _month_year(time)
    label = year.copy()
    if months[0] > months[-1]:
        label = np.where(month >= months[0], year + 1, year)
    return np.where(np.isin(month, months), label, -1)


def _complete_steps(time: xr.DataArray, season: str, period: Period | None) -> tuple[np.ndarray, np.ndarray]:
    """Indices of the time steps that belong to complete seasons, and their labels."""
    months = SEASONS[parse_season(season)]
    label = season_label_years(time, season)
    month, _ = _month_year(time)
    if _kind(time) == "climatology":
        label = np.where(label >= 0, 0, -1)  # one climatological "year"; DJF's December is the same year's
    inside = label >= 0
    if period is not None:
        inside &= (label >= period.start) & (label <= period.end)
    idx = np.flatnonzero(inside)
    # a season is complete when each of its months occurs exactly once
    keep = []
    for y in np.unique(label[idx]):
        steps = idx[label[idx] == y]
        if sorted(month[steps].tolist()) == sorted(months):
            keep.append(steps)
    if not keep:
        return np.array([], dtype=int), np.array([], dtype=int)
    steps = np.concatenate(keep)
    return steps, label[steps]


def _kind(time: xr.DataArray) -> str:
    """Kind of the steps of a canonical time axis (see evaluation.timecoding.frequency)."""
    from .timecoding import KIND_ATTR

    return str(time.attrs.get(KIND_ATTR, "monthly"))


def season_means(da: xr.DataArray, season: str, period: Period | str | None = None) -> xr.DataArray:
    """Yearly means over a season, weighted by month length in the file's calendar.

    Parameters
    ----------
    da
        Monthly field with a cftime ``time`` dimension.
    season
        ``ANN``, ``DJF`` … or a month ``JAN`` … ``DEC``.
    period
        Inclusive label years; ``None`` keeps every complete season.

    Returns
    -------
    DataArray
        ``time`` replaced by ``year`` (the season label), float64, lazy for dask input.

    Notes
    -----
    A season enters only when all its months are present.  A cell that is NaN in any
    month of a season is NaN for that season (no partial means).  An empty selection
    gives a ``year`` dimension of length 0.

    Annual means (one step per year) give ANN only, labelled by the calendar year of
    each step; every other season is empty.  A 12-month climatology gives one ``year``
    labelled 0 (no real year; ``period`` does not apply), empty when a month of the
    season is absent.
    """
    period = None if period is None else parse_period(period)
    kind = _kind(da["time"])
    if kind == "annual":
        return _annual_series(da, season, period)
    if kind == "climatology":
        period = None
    steps, labels = _complete_steps(da["time"], season, period)
    if steps.size and da.chunks is None:
        return _loaded_season_means(da, steps, labels, season)
    sub = da.isel(time=steps).astype("float64")
    if steps.size == 0:
        # checked before `.dt`, which fails on an empty object-dtype (cftime) time axis
        return sub.rename(time="year").drop_vars("year", errors="ignore").assign_coords(year=np.array([], dtype=int))
    weights = xr.DataArray(month_lengths(sub["time"]), dims="time", coords={"time": sub["time"]})
    label = xr.DataArray(labels, dims="time", name="year")
    sub = sub.assign_coords(year=label)
    weights = weights.assign_coords(year=label)
    total = (sub * weights).groupby("year").sum(dim="time", skipna=False)
    norm = weights.groupby("year").sum(dim="time")
    out = total / norm
    out.attrs = dict(da.attrs)
    out.attrs["cell_methods"] = f"time: mean within years ({season}, weighted by month length)"
    return out.drop_vars([c for c in out.coords if "time" in out[c].dims], errors="ignore")


def _loaded_season_means(da: xr.DataArray, steps: np.ndarray, labels: np.ndarray, season: str) -> xr.DataArray:
    """:func:`season_means` of data in memory: the same month-length weighted means, one
    matrix-vector product per year with numpy.

    Without this, xarray's groupby builds the same reduction through flox in about 0.1 s
    per call (importing flox costs 1 s more); one year at a time in float64 also keeps the
    memory at the loaded data plus one year, not a float64 copy of every step.
    """
    values = np.moveaxis(da.values, da.get_axis_num("time"), 0)
    weights = month_lengths(da["time"].isel(time=steps))
    years = np.unique(labels)
    out = np.empty((years.size, *values.shape[1:]), dtype="float64")
    for i, year in enumerate(years):
        this = labels == year
        w = weights[this]
        months = steps[this]
        # consecutive months (a whole year, DJF across the new year): a view, not a copy, before float64
        chosen = values[months[0]:months[-1] + 1] if np.all(np.diff(months) == 1) else values[months]
        # sum over the months of w * x, NaN in any month giving NaN (skipna=False), over sum(w)
        out[i] = np.tensordot(w, chosen.astype("float64"), axes=1) / w.sum()
    coords = {name: c for name, c in da.coords.items() if "time" not in c.dims}
    dims = [d for d in da.dims if d != "time"]
    result = xr.DataArray(out, dims=["year", *dims], coords={**coords, "year": years})  # unnamed, as the groupby quotient
    result.attrs = dict(da.attrs)
    result.attrs["cell_methods"] = f"time: mean within years ({season}, weighted by month length)"
    return result.transpose(*["year" if d == "time" else d for d in da.dims])  # year where time was, as groupby puts it


def _annual_series(da: xr.DataArray, season: str, period: Period | None) -> xr.DataArray:
    """Annual means as yearly ANN values (other seasons: a ``year`` dimension of length 0)."""
    _, year = _month_year(da["time"])
    keep = np.ones(year.size, dtype=bool) if parse_season(season) == "ANN" else np.zeros(year.size, dtype=bool)
    if period is not None:
        keep &= (year >= period.start) & (year <= period.end)
    idx = np.flatnonzero(keep)
    out = da.isel(time=idx).astype("float64").rename(time="year")
    out = out.drop_vars([c for c in out.coords if "year" in out[c].dims], errors="ignore").assign_coords(year=year[idx])
    out.attrs = dict(da.attrs)
    out.attrs["cell_methods"] = "time: mean (annual means as given)"
    return out


def climatology(series: xr.DataArray) -> xr.DataArray:
    """Mean over ``year`` of yearly season means (NaN in any year gives NaN)."""
    out = series.mean("year", skipna=False)
    out.attrs = dict(series.attrs)
    return out


def monthly_climatology(da: xr.DataArray, period: Period | str | None = None) -> xr.DataArray:
    """Mean of each calendar month over the years of ``period`` (dimension ``month``)."""
    month, year = _month_year(da["time"])
    sel = np.ones(month.size, dtype=bool)
    if period is not None and _kind(da["time"]) != "climatology":
        p = parse_period(period)
        sel = (year >= p.start) & (year <= p.end)
    sub = da.isel(time=np.flatnonzero(sel)).astype("float64")
    sub = sub.assign_coords(month=("time", month[sel]))
    out = sub.groupby("month").mean("time", skipna=False)
    out.attrs = dict(da.attrs)
    return out


def complete_years(time: xr.DataArray) -> Period | None:
    """First and last calendar years that have all twelve months, or ``None``.

    For annual means, the first and last years present; for a climatology ``None``.
    """
    kind = _kind(time)
    if kind == "climatology":
        return None
    if kind == "annual":
        _, year = _month_year(time)
        return Period(int(year.min()), int(year.max())) if year.size else None
    steps, labels = _complete_steps(time, "ANN", None)
    if labels.size == 0:
        return None
    return Period(int(labels.min()), int(labels.max()))


def years_with_data(time: xr.DataArray) -> Period | None:
    """First and last calendar years with any step (for data with gaps, e.g. one month a year)."""
    _, year = _month_year(time)
    return Period(int(year.min()), int(year.max())) if year.size else None


def default_period(spans: Iterable[Period | None], *, names: Iterable[str] | None = None) -> Period:
    """WMO 1991-2020 when every source covers it, else the overlap of all sources.

    Raises :class:`InputError` when the sources share no complete year.
    """
    spans = list(spans)
    labels = list(names) if names is not None else [f"source {i + 1}" for i in range(len(spans))]
    for span, name in zip(spans, labels, strict=True):
        if span is None:
            raise InputError("no complete year of monthly data", file=name, remedy="give at least twelve consecutive months")
    valid = [s for s in spans if s is not None]
    if all(s.covers(WMO_NORMAL) for s in valid):
        return WMO_NORMAL
    start, end = max(s.start for s in valid), min(s.end for s in valid)
    if end < start:
        parts = ", ".join(f"{n} {s}" for n, s in zip(labels, valid, strict=True))
        raise InputError(f"the sources share no complete year ({parts})", remedy="compare sources whose periods overlap")
    return Period(start, end)
